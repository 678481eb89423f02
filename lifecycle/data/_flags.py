"""Flag columns of the customers table: the decision flags (``do_not_contact``, ``hardship``)
and the columns the plan reads as flags (``[plan] exclude``, ``consent_column``), with the
export's own flag words (``[data] flag_words``)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..config import Config, setting
from ._parse import FLAG_WORDS, blank, is_text
from ._report import Report, values_of

#: The decision flags: a blank could hide a customer who must not be contacted, so each row
#: must hold a flag word.
FLAG_COLUMNS = ("do_not_contact", "hardship")


def check_flag(values: pd.Series, name: str, report: Report, read_by: str | None = None) -> None:
    """A decision flag: a flag word (1/0, true/false, yes/no, Y/N, any case) on every row.
    A column the plan reads as a flag (``read_by``: ``[plan] consent_column`` or ``exclude``)
    may be blank (not set) or any number (set when not 0, as the plan reads it), but any other
    word is refused here, before any work: the plan could not tell whether it is set."""
    codes, uniques = pd.factorize(values)
    words = [str(u).strip().lower() for u in uniques]
    known = FLAG_WORDS if read_by is None else set(FLAG_WORDS) | _numeric_words(words)
    wrong = np.append([w not in known for w in words], read_by is None)[codes]
    if read_by is not None:
        wrong &= ~blank(values)
    what = "a decision flag" if read_by is None else f"read as a flag ({read_by})"
    blanks = "blank is not allowed" if read_by is None else "or blank"
    report.fail(
        name,
        f"is {what} and must be 1/0, true/false, yes/no or Y/N on every row ({blanks}), not "
        f"{values_of(values.fillna(''), wrong, 3)}",
        wrong,
        "Write 1 (or Y) where the flag is set and 0 (or N) where it is not, or name your "
        'words in [data] flag_words, e.g. flag_words = { J = "1", N = "0" }',
    )


def own_flag_words(raw: pd.DataFrame, config: Config, columns: list[str]) -> pd.DataFrame:
    """The flag columns with the export's own words (``[data] flag_words``, any case) written
    as 1 and 0; the other columns as they are."""
    words = {
        str(k).strip().lower(): v for k, v in (setting(config, "data.flag_words") or {}).items()
    }
    present = [c for c in dict.fromkeys(columns) if c in raw.columns and is_text(raw[c])]
    if not words or not present:
        return raw
    raw = raw.copy(deep=False)
    for name in present:
        low = raw[name].astype("string").str.strip().str.lower()
        raw[name] = raw[name].astype(object).where(~low.isin(words).fillna(False), low.map(words))
    return raw


def _numeric_words(words: list[str]) -> set[str]:
    numbers = pd.to_numeric(pd.Series(words, dtype=object), errors="coerce").to_numpy(float)
    return {w for w, x in zip(words, numbers, strict=True) if np.isfinite(x)}


def plan_flag_columns(config: Config) -> dict[str, str]:
    """Columns the plan reads as flags beside the decision flags: column → its setting."""
    extra = setting(config, "plan.exclude")
    extra = [extra] if isinstance(extra, str) else list(extra or [])
    out = {str(c): "[plan] exclude" for c in extra if c not in FLAG_COLUMNS}
    consent = setting(config, "plan.consent_column")
    if consent:
        out[str(consent)] = "[plan] consent_column"
    return out
