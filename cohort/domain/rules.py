"""The machinery that checks a study file against its rules: rules as data, all problems at once.

A :class:`Rule` says what one value must be (its ``expected`` text and a test); a
:class:`TableSchema` lists the keys of one table with their rules, the keys that are
required, keys that are known but not configurable, named sub-tables (``[findings.<name>]``)
and a hook for rules that relate several keys. :func:`check_document` checks a whole study
file against a mapping of table name -> schema and returns every problem (code
``study-option``); unknown tables and keys get a did-you-mean hint
(:func:`difflib.get_close_matches`). A table added later is covered by adding its schema.

Value rules shared by every table: TOML booleans are never numbers (``bool`` is an ``int``
subclass in Python); integers must be TOML integers (``2000.0`` is refused, like
``2000.5``); numbers must be finite (TOML allows ``nan`` and ``inf``).

The rules of each table are in :mod:`cohort.domain.options` (``[study]``, ``[units]``,
``[field]``, ``[checks]``, ``[analysis]``) and :mod:`cohort.domain.thresholds`
(``[findings]``); :mod:`cohort.io.settings` reads a study file with them.
"""

from __future__ import annotations

import difflib
import math
import numbers
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

from cohort.domain.problems import Problem


@dataclass(frozen=True)
class Rule:
    """What one value of a study file must be.

    ``accepts(value)`` says whether the value is valid; ``expected`` says in words what is
    (shown in the problem); ``kind`` names the type expected (``integer``, ``number``,
    ``bool``, ``text``, ``list``, ``table``, ``other``) for the hints about common traps;
    ``choices`` are the allowed words, for the did-you-mean hint.
    """

    expected: str
    accepts: Callable[[Any], bool]
    kind: str = "other"
    choices: tuple[str, ...] = ()


Hook = Callable[[Mapping[str, Any], frozenset[str], str, Mapping[str, Any]], list[Problem]]
"""Rules relating several keys: ``(table, bad keys, file, whole document) -> problems``; the
bad keys (and sub-tables) already have a problem and are to be left alone."""


@dataclass(frozen=True)
class TableSchema:
    """The keys of one table of a study file, each with its :class:`Rule`.

    ``fixed`` maps keys that are known but not configurable to the reason (they are
    refused with it); ``entries`` are the rules of named sub-tables (``[findings.<name>]``);
    ``check`` gives the problems of rules relating several keys (see :data:`Hook`).
    """

    keys: Mapping[str, Rule]
    required: tuple[str, ...] = ()
    fixed: Mapping[str, str] = field(default_factory=dict)
    entries: Mapping[str, Rule] | None = None
    check: Hook | None = None


def is_integer(value: object) -> bool:
    """A TOML integer (or Python int): not a bool, not a float (``2000.0`` included)."""
    return isinstance(value, numbers.Integral) and not isinstance(value, bool)


def is_number(value: object) -> bool:
    """A finite int or float, not a bool (TOML allows ``nan`` and ``inf``; we do not)."""
    if not isinstance(value, numbers.Real) or isinstance(value, bool):
        return False
    try:
        return math.isfinite(float(value))
    except OverflowError:  # an int beyond the float range (not from TOML: 64-bit integers)
        return False


def _within(value: float, low: float | None, high: float | None, open_: bool) -> bool:
    if low is not None and (value <= low if open_ else value < low):
        return False
    return not (high is not None and (value >= high if open_ else value > high))


def _range_text(low: float | None, high: float | None, open_: bool) -> str:
    if low is not None and high is not None:
        return f"strictly between {low:g} and {high:g}" if open_ else f"{low:g} to {high:g}"
    if low is not None:
        return f"{'>' if open_ else '>='} {low:g}"
    if high is not None:
        return f"{'<' if open_ else '<='} {high:g}"
    return ""


def integer(low: int | None = None, high: int | None = None, note: str = "") -> Rule:
    """An integer (TOML integer, no decimal point) from ``low`` to ``high``."""
    limits = _range_text(low, high, False)
    return Rule(
        f"an integer{' ' + limits if limits else ''}{note}",
        lambda v: is_integer(v) and _within(int(v), low, high, False),
        "integer",
    )


def number(
    low: float | None = None, high: float | None = None, *, open_: bool = False, note: str = ""
) -> Rule:
    """A finite number (integer or decimal) within the limits (``open_``: limits excluded)."""
    limits = _range_text(low, high, open_)
    return Rule(
        f"a finite number{' ' + limits if limits else ''}{note}",
        lambda v: is_number(v) and _within(float(v), low, high, open_),
        "number",
    )


def flag() -> Rule:
    """``true`` or ``false``."""
    return Rule("true or false", lambda v: isinstance(v, bool), "bool")


def text() -> Rule:
    """Text that is not blank."""
    return Rule("text (not blank)", lambda v: isinstance(v, str) and bool(v.strip()), "text")


def choice(allowed: tuple[str, ...]) -> Rule:
    """One of the words ``allowed``."""
    return Rule(
        f"one of {list(allowed)}" if len(allowed) > 1 else repr(allowed[0]),
        lambda v: isinstance(v, str) and v in allowed,
        "text",
        tuple(allowed),
    )


def _is_list(value: object) -> bool:
    return isinstance(value, list | tuple)


def texts(allowed: tuple[str, ...] | None = None, *, min_items: int = 0) -> Rule:
    """A list of distinct, non-blank texts (each one of ``allowed`` if given)."""

    def accepts(value: object) -> bool:
        if not _is_list(value) or len(value) < min_items:  # type: ignore[arg-type]
            return False
        items = list(value)  # type: ignore[call-overload]
        if not all(isinstance(v, str) and v.strip() for v in items):
            return False
        if allowed is not None and any(v not in allowed for v in items):
            return False
        return len({v.strip() for v in items}) == len(items)

    what = "names" if allowed is None else f"names among {list(allowed)}"
    least = {0: "", 1: "at least one, "}.get(min_items, f"at least {min_items}, ")
    return Rule(f"a list of {least}distinct {what}", accepts, "list", tuple(allowed or ()))


def integers(low: int, high: int, *, min_items: int = 1) -> Rule:
    """A list of distinct integers from ``low`` to ``high`` (segment numbers)."""

    def accepts(value: object) -> bool:
        if not _is_list(value) or len(value) < min_items:  # type: ignore[arg-type]
            return False
        items = list(value)  # type: ignore[call-overload]
        if not all(is_integer(v) and low <= v <= high for v in items):
            return False
        return len(set(items)) == len(items)

    return Rule(f"a list of distinct integers from {low} to {high}", accepts, "list")


def labels() -> Rule:
    """A table of name = "text" pairs (display labels)."""

    def accepts(value: object) -> bool:
        return isinstance(value, Mapping) and all(
            isinstance(v, str) and v.strip() for v in value.values()
        )

    return Rule('a table of name = "label" pairs (labels are text)', accepts, "table")


def either(first: Rule, second: Rule) -> Rule:
    """A value that satisfies one of two rules."""
    return Rule(
        f"{first.expected}, or {second.expected}",
        lambda v: first.accepts(v) or second.accepts(v),
        "other",
        first.choices + second.choices,
    )


def value_text(value: object) -> str:
    """A value as it would be written in TOML (``true``, ``nan``, ``[1, 2]``)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float) and not math.isfinite(value):
        return "nan" if math.isnan(value) else ("inf" if value > 0 else "-inf")
    if isinstance(value, list | tuple):
        return "[" + ", ".join(value_text(v) for v in value) + "]"
    if isinstance(value, Mapping):
        return "{" + ", ".join(f"{k} = {value_text(v)}" for k, v in value.items()) + "}"
    return str(value)


def did_you_mean(word: object, known: Any) -> str:
    """``"; did you mean 'x'?"`` for the closest of ``known``, or ``""``."""
    close = difflib.get_close_matches(str(word), [str(k) for k in known], n=1, cutoff=0.6)
    return f"; did you mean '{close[0]}'?" if close else ""


def _trap(value: object, rule: Rule) -> str:
    """Why a value of the right look is refused: the traps of TOML and Python."""
    numeric = rule.kind in ("integer", "number")
    if numeric and isinstance(value, bool):
        return " (true/false is not a number)"
    if numeric and isinstance(value, float) and not math.isfinite(value):
        return " (nan and inf are not accepted)"
    if rule.kind == "integer" and isinstance(value, float):
        return " (an integer is written without a decimal point, e.g. 2000)"
    if numeric and isinstance(value, str):
        return " (a number is written without quotes)"
    if rule.choices and isinstance(value, str):
        return did_you_mean(value, rule.choices)
    if rule.kind == "list" and rule.choices and isinstance(value, list | tuple):
        unknown = [v for v in value if v not in rule.choices]
        if unknown:
            return f" (unknown: {value_text(unknown)}{did_you_mean(unknown[0], rule.choices)})"
    return ""


def study_problem(
    file: str, detail: str, value: object = None, expected: str | None = None
) -> Problem:
    """A ``study-option`` problem located in ``file`` (the table and key are in ``detail``)."""
    return Problem(
        "study-option",
        detail,
        file=file,
        value=None if value is None else value_text(value),
        expected=expected,
    )


def check_value(file: str, name: str, value: object, rule: Rule) -> list[Problem]:
    """One problem if ``value`` breaks ``rule`` (``name`` is e.g. ``"[analysis] n_boot"``)."""
    if rule.accepts(value):
        return []
    return [study_problem(file, f"{name} is not valid{_trap(value, rule)}", value, rule.expected)]


def _key_problems(
    file: str,
    where: str,
    key: str,
    value: object,
    keys: Mapping[str, Rule],
    fixed: Mapping[str, str],
    elsewhere: Mapping[str, str],
) -> list[Problem]:
    if key in keys:
        return check_value(file, f"{where} {key}", value, keys[key])
    if key in fixed:
        return [
            study_problem(
                file, f"{where} {key} is not configurable: {fixed[key]}", key, "remove the key"
            )
        ]
    hint = did_you_mean(key, keys)
    if not hint and key in elsewhere:
        hint = f"; did you mean '{key}' in [{elsewhere[key]}]?"
    return [
        study_problem(file, f"unknown key '{key}' in {where}{hint}", key, f"one of {sorted(keys)}")
    ]


def check_table(
    name: str,
    content: object,
    schema: TableSchema,
    file: str,
    document: Mapping[str, Any] | None = None,
    elsewhere: Mapping[str, str] | None = None,
) -> list[Problem]:
    """Every problem of one table against its schema: its keys, its named sub-tables, the
    required keys, then the rules relating several keys (``schema.check``)."""
    where = f"[{name}]"
    if not isinstance(content, Mapping):
        return [study_problem(file, f"{where} must be a table", content, "a table of keys")]
    problems: list[Problem] = []
    bad: set[str] = set()
    for key, value in content.items():
        if schema.entries is not None and isinstance(value, Mapping) and key not in schema.keys:
            found = [
                p
                for sub_key, sub_value in value.items()
                for p in _key_problems(
                    file, f"[{name}.{key}]", sub_key, sub_value, schema.entries, {}, {}
                )
            ]
        else:
            found = _key_problems(
                file, where, key, value, schema.keys, schema.fixed, elsewhere or {}
            )
        if found:
            bad.add(key)
            problems += found
    for key in schema.required:
        if key not in content:
            problems.append(
                study_problem(file, f"{where} needs '{key}'", None, schema.keys[key].expected)
            )
    if schema.check is not None:
        problems += schema.check(content, frozenset(bad), file, document or {name: content})
    return problems


def check_document(
    document: Mapping[str, Any], schema: Mapping[str, TableSchema], file: str
) -> list[Problem]:
    """Every problem of a whole study file: unknown tables, then each table in turn."""
    owner = {key: name for name, table in schema.items() for key in table.keys}
    problems: list[Problem] = []
    for name, content in document.items():
        if name in schema:
            continue
        if not isinstance(content, Mapping):
            close = difflib.get_close_matches(name, list(owner), n=1, cutoff=0.6)
            hint = f"; did you mean '{close[0]}' in [{owner[close[0]]}]?" if close else ""
            problems.append(
                study_problem(
                    file, f"key '{name}' is outside any table{hint}", name,
                    f"keys inside one of the tables {[f'[{t}]' for t in schema]}",
                )
            )  # fmt: skip
            continue
        problems.append(
            study_problem(
                file,
                f"unknown table [{name}]{did_you_mean(name, schema)}",
                name,
                f"one of {[f'[{t}]' for t in schema]}",
            )
        )
    for name, table in schema.items():
        if name in document:
            problems += check_table(name, document[name], table, file, document, owner)
        elif table.required:
            problems.append(
                study_problem(file, f"[{name}] is missing", None,
                              f"a table [{name}] with {list(table.required)}")
            )  # fmt: skip
    return problems
