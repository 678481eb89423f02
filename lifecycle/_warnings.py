"""Warnings of the libraries under the model families, caught and logged in our words.

lifelines, scikit-learn, scikit-survival, pandas and numpy warn in their own terms: lifelines
names its internal columns (``x3``, ``_event_``) and suggests code the user never wrote.
`library_warnings` records every warning raised inside it and logs each distinct one once, at
WARNING level, naming the family, the cause and the feature concerned; nothing reaches the
user raw. Inside `logged_once` (the command line opens one per command) a message already
logged is not repeated by later fits, such as the backtest's fits at further cutoffs.
"""

from __future__ import annotations

import contextlib
import contextvars
import logging
import re
import threading
import warnings
from collections.abc import Iterator, Mapping

log = logging.getLogger(__name__)

_SEEN: contextvars.ContextVar[set[str] | None] = contextvars.ContextVar("_SEEN", default=None)
_LIBRARIES = ("lifelines", "sksurv", "sklearn", "scipy", "pandas", "numpy", "joblib")


@contextlib.contextmanager
def library_warnings(
    family: str, cause: str | None = None, *, names: Mapping[str, str] | None = None
) -> Iterator[None]:
    """Catch the warnings raised inside; log each distinct one once, in our words.

    Parameters
    ----------
    family
        The model family (``cox``, ``forest``, ``boosted``, ...), named in each message.
    cause
        The cause being fitted, when there is one.
    names
        Library-side column names → ours (e.g. ``{"x3": "monthly_margin"}``), replaced as
        whole words in the library's text before it is read.
    """
    if threading.current_thread() is not threading.main_thread():
        # the warnings filters are one global state: catching them in several threads at
        # once (Dask workers scoring partitions) could leave one thread's filter behind
        yield
        return
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            yield
        finally:
            _log(caught, family, cause, dict(names or {}))


@contextlib.contextmanager
def logged_once() -> Iterator[None]:
    """Within this block, a library warning already logged is not logged again."""
    token = _SEEN.set(set())
    try:
        yield
    finally:
        _SEEN.reset(token)


def _log(caught: list, family: str, cause: str | None, names: dict[str, str]) -> None:
    counts: dict[str, int] = {}
    for item in caught:
        text = in_our_words(str(item.message), item.category, item.filename, names)
        counts[text] = counts.get(text, 0) + 1
    seen = _SEEN.get()
    where = f"{family}: {cause}: " if cause else f"{family}: "
    for text, count in counts.items():
        key = where + text
        if seen is not None:
            if key in seen:
                continue
            seen.add(key)
        log.warning("%s%s%s", where, text, f" ({count} times)" if count > 1 else "")


def in_our_words(
    message: str, category: type[Warning], filename: str, names: Mapping[str, str]
) -> str:
    """The library's warning as one sentence of ours (the library's own first sentence,
    with our column names, when the warning is not one we know)."""
    text = " ".join(message.split())
    if names:
        theirs = "|".join(re.escape(n) for n in sorted(names, key=len, reverse=True))
        text = re.sub(rf"(?<!\w)(?:{theirs})(?!\w)", lambda m: names[m.group(0)], text)
    for pattern, words in _KNOWN:
        match = pattern.search(text)
        if match:
            return words.format(*(g.strip("'\"[] ") for g in match.groups()))
    library = next((lib for lib in _LIBRARIES if f"{lib}" in filename.replace("\\", "/")), "")
    first = re.split(r"(?<=[.!?])\s|\s>>>|\sSee http", text)[0].strip()
    return f"{library or 'a library'} warned ({category.__name__}): {first}"


_KNOWN: tuple[tuple[re.Pattern[str], str], ...] = tuple(
    (re.compile(pattern), words)
    for pattern, words in (
        (
            r"Column (\S+) have very low variance when conditioned on death event",
            "feature '{0}' barely varies among the events (or among the months without one): "
            "with a variance near 0 there it nearly decides alone who has the event "
            "(separation), and its hazard ratio may be extreme and unstable. Leave it out "
            "([panel] not_features) or shrink its ratio with [models.cox] penalizer (e.g. "
            "0.01, larger if one is set: the penalty steadies the ratio, the warning stays)",
        ),
        (
            r"Column\(s\) (\[.*?\]) have very low variance",
            "feature(s) {0} barely vary in the rows fitted; they add nothing and can stop the "
            "fit from converging",
        ),
        (
            r"Column (\S+) has high sample correlation with the duration column",
            "feature '{0}' moves almost in step with tenure, so its effect cannot be told apart "
            "from the baseline hazard; its estimate may be unstable",
        ),
        (
            r"Newton-Raphson failed to converge sufficiently in (\d+) steps",
            "the fit stopped after {0} steps without fully converging; its estimates may be "
            "imprecise (a penalizer > 0, e.g. [models.cox] penalizer = 0.01, helps)",
        ),
        (
            r"convergence completed but norm\(delta\) is still high, (\d+(?:\.\d+)?)",
            "the fit converged but its last step was still large ({0}): features may be "
            "collinear or separate the events, and the estimates may not be unique",
        ),
        (
            r"log-likelihood is getting suspiciously close to 0",
            "the fit explains nearly every event exactly (complete separation): some feature "
            "decides who has the event, and the estimates are not reliable",
        ),
        (
            r"more variables than samples",
            "there are more features than rows at risk; the estimates are not reliable",
        ),
        (
            r"Column (\S+) has a large mean",
            "feature '{0}' has a very large mean; the fit may converge slowly",
        ),
        (
            r"(divide by zero|overflow|invalid value) encountered in (\w+)",
            "a computation gave an infinite or undefined value ({0} in {1}); the values it "
            "touched may be NaN or infinite",
        ),
        (
            r"(?:did not|failed to) converge",
            "the library's optimiser did not converge; the estimates may be imprecise",
        ),
    )
)
