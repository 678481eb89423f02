"""One schema for every setting of ``lifecycle.toml``: kinds, checks, validation and template.

The sections and keys themselves are declared once, in `lifecycle._settings_keys`. This module
holds what they are made of and what is done with them:

- `Key` (one setting: name, kind, default, one line of meaning, optional check) and `Section`
  (a ``[table]``, an ``[[array]]`` of tables, or a table of keys the user names, such as
  ``[reasons]``);
- `validate` checks a parsed file as a whole: an unknown section or key, a value of the wrong
  kind (a whole number is never cut from a float), a value outside its range, a required key
  missing, each raise `UsageError` naming the file, the section, the key, the value given and
  what is allowed;
- `template` writes the documented ``lifecycle.toml`` of every section and key (what
  ``lifecycle settings`` prints): itself a valid file that gives the defaults;
- `setting` reads one value, or its default, from a validated file.

To declare a new key, add ``Key(name, kind, default, meaning, check)`` to its section in
`lifecycle._settings_keys` (a new section: a `Section` in ``SECTIONS``).
"""

from __future__ import annotations

import difflib
import math
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

from .errors import UsageError

_SHOWN = 60


@dataclass(frozen=True)
class Kind:
    """What a value must be, in words (``describe``) and as a test (``accepts``)."""

    describe: str
    accepts: Callable[[Any], bool]


@dataclass(frozen=True)
class Check:
    """A rule on an accepted value: ``describe`` ("in (0, 1]") and ``ok``."""

    describe: str
    ok: Callable[[Any], bool]


@dataclass(frozen=True)
class Key:
    """One setting.

    Attributes
    ----------
    name
        The key; in a section of user-named keys a pattern such as ``min_<column>`` (each
        ``<...>`` stands for any text).
    kind
        What the value must be (`Kind`).
    default
        The value used when the key is absent; ``None`` when there is none (the meaning says
        what happens then).
    meaning
        One line: what the setting does.
    check
        A further rule on the value (`Check`), or ``None``.
    required
        True when the key must be given (in each ``[[offers]]`` table, say).
    example
        A value to show in the template when there is no default.
    """

    name: str
    kind: Kind
    default: Any
    meaning: str
    check: Check | None = None
    required: bool = False
    example: Any = None

    def allowed(self) -> str:
        """What is allowed, in words: the kind and the check."""
        extra = self.check.describe if self.check else ""
        if extra.startswith("one of"):
            return extra
        return self.kind.describe + (f" {extra}" if extra else "")

    def matches(self, name: str) -> bool:
        """Whether ``name`` is this key (or fits its ``<...>`` pattern)."""
        if "<" not in self.name:
            return name == self.name
        parts = re.split(r"<[^>]*>", self.name)
        return re.fullmatch(".+".join(map(re.escape, parts)), name) is not None


@dataclass(frozen=True)
class Section:
    """A table of settings.

    ``name`` is dotted (``models.cox``, ``offers.eligible``); ``many`` marks an array of
    tables (``[[offers]]``); ``open`` holds keys named by the user (patterns); ``examples``
    are lines the template shows, commented, for sections that have no defaults.
    """

    name: str
    meaning: str
    keys: tuple[Key, ...] = ()
    many: bool = False
    open: tuple[Key, ...] = ()
    examples: tuple[str, ...] = field(default=())

    def key(self, name: str) -> Key | None:
        """The key ``name`` of this section, fixed or patterned, or ``None``."""
        for key in self.keys:
            if key.name == name:
                return key
        return next((k for k in self.open if k.matches(name)), None)


# -- kinds and checks -------------------------------------------------------------------------
def _is_int(v: Any) -> bool:
    return isinstance(v, int) and not isinstance(v, bool)


def _is_number(v: Any) -> bool:
    return (_is_int(v) or isinstance(v, float)) and math.isfinite(v)


TEXT = Kind("a text", lambda v: isinstance(v, str))
WHOLE = Kind("a whole number", _is_int)
NUMBER = Kind("a number", _is_number)
NUMBER_OR_INF = Kind("a number (inf allowed)", lambda v: _is_number(v) or v == math.inf)
FLAG = Kind("true or false", lambda v: isinstance(v, bool))
TEXTS = Kind(
    "a list of texts", lambda v: isinstance(v, list) and all(isinstance(x, str) for x in v)
)
NUMBERS = Kind("a non-empty list of numbers", lambda v: isinstance(v, list) and v != [] and all(
    _is_number(x) for x in v))  # fmt: skip
TEXT_OR_TEXTS = Kind("a text or a list of texts", lambda v: TEXT.accepts(v) or TEXTS.accepts(v))
WHOLES_BY_TEXT = Kind(
    "a table of column = whole number",
    lambda v: isinstance(v, dict) and all(_is_int(x) for x in v.values()),
)


def _scalar(v: Any) -> bool:
    return isinstance(v, str | bool) or _is_number(v)


VALUE_OR_VALUES = Kind(
    "a value or a non-empty list of values (texts or numbers)",
    lambda v: _scalar(v) or (isinstance(v, list) and v != [] and all(map(_scalar, v))),
)
PHRASE = Kind(
    'a text, or a table { high = "...", low = "..." }',
    lambda v: isinstance(v, str) or (
        isinstance(v, dict) and v != {} and set(v) <= {"high", "low"}
        and all(isinstance(x, str) for x in v.values())
    ),
)  # fmt: skip


def one_of(*kinds: Kind, describe: str | None = None) -> Kind:
    """A value of any of ``kinds``."""
    words = describe or " or ".join(k.describe for k in kinds)
    return Kind(words, lambda v: any(k.accepts(v) for k in kinds))


def _n(x: float) -> str:
    return str(x) if isinstance(x, int) else f"{x:g}"


def at_least(low: float) -> Check:
    return Check(f">= {_n(low)}", lambda v: v >= low)


def above(low: float) -> Check:
    return Check(f"> {_n(low)}", lambda v: v > low)


def between(low: float, high: float, *, low_open: bool = False, high_open: bool = False) -> Check:
    """``low <= v <= high``, each end open when asked (shown as interval brackets)."""
    text = f"in {'(' if low_open else '['}{_n(low)}, {_n(high)}{')' if high_open else ']'}"
    return Check(text, lambda v: (v > low if low_open else v >= low) and (
        v < high if high_open else v <= high))  # fmt: skip


def choice(*values: Any) -> Check:
    return Check(f"one of {list(values)}", lambda v: v in values)


def each(check: Check) -> Check:
    """``check`` on every item of a list (or every value of a table)."""

    def ok(v: Any) -> bool:
        items = v.values() if isinstance(v, dict) else v
        return all(check.ok(x) for x in items)

    return Check(f"(each {check.describe})", ok)


def unique() -> Check:
    return Check("(no repeats)", lambda v: len(set(v)) == len(v))


def both(first: Check, second: Check) -> Check:
    return Check(f"{first.describe} {second.describe}", lambda v: first.ok(v) and second.ok(v))


# -- validation -------------------------------------------------------------------------------
def shown(value: Any) -> str:
    """A value as written in TOML, cut to a readable length."""
    text = toml_value(value)
    return text if len(text) <= _SHOWN else text[: _SHOWN - 1] + "…"


def validate(raw: Mapping[str, Any], sections: tuple[Section, ...], source: str) -> None:
    """Check a parsed ``lifecycle.toml`` against ``sections``; raise `UsageError` on the first
    fault, naming ``source``, the section, the key, the value given and what is allowed."""
    by_name = {s.name: s for s in sections}
    _check_table(raw, (), ("", ""), by_name, source)


def _check_table(
    table: Mapping[str, Any], path: tuple[str, ...], entry: tuple[str, str], by_name, src: str
) -> None:
    """Check one table; ``entry`` is ``(label, section)`` of the ``[[array]]`` entry it is in."""
    dotted = ".".join(path)
    section = by_name.get(dotted)
    label, root = entry
    here = label if dotted == root else f"[{dotted}]" + (f" of {label}" if label else "")
    for name, value in table.items():
        sub = f"{dotted}.{name}" if dotted else name
        if sub in by_name:
            _check_section(value, by_name[sub], (*path, name), entry, by_name, src)
        elif section is not None and (key := section.key(name)) is not None:
            _check_value(key, name, value, here, src)
        elif any(s.startswith(sub + ".") for s in by_name):
            if not isinstance(value, dict):
                raise UsageError(
                    f"{src}: [{sub}] was {shown(value)} but is expected to be a group of "
                    f"sections such as {', '.join(f'[{c}]' for c in _children(sub, by_name))}"
                )
            _check_table(value, (*path, name), entry, by_name, src)
        else:
            raise _unknown(name, value, section, dotted, here, by_name, src)
    if section is not None:
        missing = [k.name for k in section.keys if k.required and k.name not in table]
        if missing:
            raise UsageError(
                f"{src}: {here} lacks the required setting(s) {missing}; "
                "`lifecycle settings` shows each one"
            )


def _check_section(
    value: Any, section: Section, path: tuple[str, ...], entry: tuple[str, str], by_name, src
) -> None:
    dotted = section.name
    if section.many:
        if isinstance(value, dict):
            raise UsageError(f"{src}: [{dotted}] must be written [[{dotted}]], one table per entry")
        if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
            raise UsageError(
                f"{src}: {dotted} was {shown(value)} but is expected to be [[{dotted}]] tables"
            )
        for position, item in enumerate(value, start=1):
            _check_table(item, path, (f"[[{dotted}]] #{position}", dotted), by_name, src)
        return
    if not isinstance(value, dict):
        raise UsageError(
            f"{src}: [{dotted}] was {shown(value)} but is expected to be a table of settings "
            f"(a [{dotted}] heading with key = value lines below it)"
        )
    _check_table(value, path, entry, by_name, src)


def _check_value(key: Key, name: str, value: Any, where: str, src: str) -> None:
    if key.kind.accepts(value) and (key.check is None or key.check.ok(value)):
        return
    hint = ""
    if key.kind is WHOLE and isinstance(value, float):
        hint = " (a number without a fraction, e.g. 12, not 12.0 or 12.9)"
    elif key.kind is TEXT and not isinstance(value, str):
        hint = f" (write it in quotes: {shown(str(value))})"
    raise UsageError(
        f"{src}: {where} {name} was {shown(value)} but is expected to be {key.allowed()}{hint}"
    )


def _unknown(name, value, section, dotted, here, by_name, src) -> UsageError:
    name = name if len(name) <= 40 else name[:39] + "…"

    def mean(options: list[str], word: str, fmt: str) -> str:
        close = difflib.get_close_matches(word, options, n=1, cutoff=0.6)
        return f" (did you mean {fmt.format(close[0])}?)" if close else ""

    see = " (`lifecycle settings` shows each one)"
    if section is None and not dotted:
        roots = sorted({s.split(".")[0] for s in by_name})
        listed = ", ".join(f"[{r}]" for r in roots)
        if isinstance(value, dict | list):
            hint = mean(roots, name, "[{}]")
            return UsageError(
                f"{src}: unknown section [{name}]{hint}. The sections are {listed}{see}"
            )
        return UsageError(
            f"{src}: {name} = {shown(value)} stands outside any section; put it under its "
            f"section's heading. The sections are {listed}{see}"
        )
    if section is None:
        children = _children(dotted, by_name)
        hint = mean(children, f"{dotted}.{name}", "[{}]")
        listed = ", ".join(f"[{c}]" for c in children)
        return UsageError(f"{src}: unknown section [{dotted}.{name}]{hint}. Allowed are {listed}")
    names = [k.name for k in (*section.keys, *section.open)]
    names += [s.split(".")[-1] for s in _children(dotted, by_name)]
    hint = mean(names, name, "{!r}")
    return UsageError(
        f"{src}: {here} has an unknown setting {name!r} (given {shown(value)}){hint}. Its "
        "settings are "
        f"{names}{see}"
    )


def _children(dotted: str, by_name: dict) -> list[str]:
    depth = dotted.count(".") + 1
    return sorted(s for s in by_name if s.startswith(dotted + ".") and s.count(".") == depth)


# -- reading ----------------------------------------------------------------------------------
def setting(raw: Mapping[str, Any], sections: tuple[Section, ...], dotted_key: str) -> Any:
    """The value of ``section.key`` in a validated file, else the schema's default."""
    section_name, _, name = dotted_key.rpartition(".")
    table: Any = raw
    for part in section_name.split("."):
        table = table.get(part, {}) if isinstance(table, Mapping) else {}
    if isinstance(table, Mapping) and name in table:
        return table[name]
    section = {s.name: s for s in sections}[section_name]
    key = section.key(name)
    if key is None:
        raise KeyError(dotted_key)
    return key.default


# -- the template -----------------------------------------------------------------------------
def toml_value(value: Any) -> str:
    """``value`` written as a TOML value."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, float):
        return "inf" if value == math.inf else repr(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, list | tuple):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        if not value:
            return "{}"
        inner = ", ".join(f"{_toml_key(k)} = {toml_value(v)}" for k, v in value.items())
        return "{ " + inner + " }"
    return str(value)  # TOML dates and times


def _toml_key(name: str) -> str:
    return name if re.fullmatch(r"[A-Za-z0-9_-]+", name) else toml_value(name)


def template(sections: tuple[Section, ...], *, examples: bool = False) -> str:
    """The documented ``lifecycle.toml``: every section and key with its kind, default and
    meaning. Keys without a default (and sections of examples) are written commented out,
    so that the file gives the defaults; ``examples=True`` writes them live instead."""
    comment = "" if examples else "# "
    lines = [
        "# lifecycle.toml: every setting, its kind, its default and what it does.",
        "# Every section and key is optional unless marked required. A line '# key = value'",
        "# is one to fill in (a setting with no default, or in a section that exists only when",
        "# you write it, such as [[offers]]): remove the '# ' to use it.",
    ]
    in_many = tuple(s.name for s in sections if s.many)
    for section in sections:
        heading = f"[[{section.name}]]" if section.many else f"[{section.name}]"
        listed = any(section.name == m or section.name.startswith(m + ".") for m in in_many)
        live = not listed and any(k.default is not None for k in section.keys)
        lines += ["", f"# --- {section.meaning[:1].upper()}{section.meaning[1:]}"]
        lines.append(heading if live or examples else f"# {heading}")
        for key in section.keys:
            lines.append(f"#   {key.name}: {key.meaning}")
            lines.append(f"#     ({key.allowed()}; {_default_words(key)})")
            value = key.default if key.default is not None else key.example
            if value is not None:
                prefix = "" if live and key.default is not None else comment
                lines.append(f"{prefix}{key.name} = {toml_value(value)}")
        for key in section.open:
            lines.append(f"#   {key.name} = {key.meaning}")
            lines.append(f"#     ({key.allowed()})")
        lines += [f"{comment}{line}" for line in section.examples]
    return "\n".join(lines) + "\n"


def _default_words(key: Key) -> str:
    if key.required:
        return "required"
    if key.default is None:
        return "no default"
    return f"default {toml_value(key.default)}"
