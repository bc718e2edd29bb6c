"""Rules of the study file as data: every key of every table, its type, range and default.

The tables and their keys (the ``[findings]`` table's rules are in
:mod:`cohort.domain.thresholds`; the machinery that applies rules is :mod:`cohort.domain.rules`;
:mod:`cohort.io.settings` reads a study file with them, once)::

    [study]     title, values, subjects, reference, segment_model, groups, group_labels,
                methods, method_labels, identifying_columns      STUDY_RULES
    [units]     ff, field                            UNITS_RULES
    [field]     referencing, remote_segments         FIELD_RULES
    [checks]    plausibility limits                  CHECK_RULES, Checks
    [analysis]  analysis options                     ANALYSIS_RULES, RunOptions

The ``[analysis]`` table (all keys optional)::

    [analysis]
    seed = 20261202            # bootstrap seed: an integer >= 0
    n_boot = 2000              # resamples: 0 (no bootstrap, analytic intervals) or 20-1000000
    confidence_level = 0.95    # strictly between 0 and 1
    strata = ["all", "group", "ring", "territory"]   # at least one, each once
    ratio_parameters = ["r2star"]   # "ff" and/or "r2star": also on the ratio (log) scale
    error_ratio = 1.0          # Deming: var(error test) / var(error reference), > 0
    regression_limits = false  # Bland & Altman 1999 regression-based limits
    correction = "holm"        # multiple testing: "holm" or "fdr_bh"
    ccc_min = 0.9              # deceptive-agreement warning: CCC at or above ... (0-1)
    sensitivity_max = 0.8      # ... while sensitivity for a finding is below this (0-1)
    bias_ratio = 2.0           # ... or bias in positive segments this many times (>= 1)
    pb_max_pairs = 500000      # rows with more pairs get no Passing-Bablok fit (>= 0)
    workers = 0                # processes (0 = one per core, at most 4); results unchanged

Command-line options (``--seed``, ``--bootstrap``, ``--workers``) override the study file
and obey the same rules (:func:`override_options`).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import asdict, dataclass, replace
from types import MappingProxyType
from typing import Any

from cohort.domain.problems import Problem, StudyError
from cohort.domain.rules import (
    Rule,
    TableSchema,
    check_value,
    choice,
    flag,
    integer,
    integers,
    is_integer,
    labels,
    number,
    study_problem,
    text,
    texts,
)
from cohort.domain.segments import MODELS, SEGMENTS
from cohort.domain.units import FF_UNITS, FIELD_UNITS, PARAMETERS, R2STAR_UNITS, T2STAR_UNITS

# --- [study], [units], [field], [checks] --------------------------------------------------


@dataclass(frozen=True)
class Checks:
    """Plausibility limits of the loader; each is a documented default, configurable."""

    ff_below_zero_tolerance: float = 5.0
    """Fat fraction slightly below 0 % is legal noise near zero (Liu et al. 2007, memory)."""
    ff_above_100_tolerance: float = 5.0
    r2star_max: float = 1000.0
    """1/s: T2* of 1 ms; well above myocardial hemorrhage or iron overload (common practice)."""
    t2star_r2star_tolerance: float = 0.01
    field_max_abs_hz: float = 2000.0
    """Hz: far beyond myocardial off-resonance at 1.5-3 T (tens to a few hundred Hz;
    common practice); larger values are unit or export errors."""
    implausible: str = "refuse"
    """What an implausible value does: ``"refuse"`` the study (an error listing each one) or
    ``"exclude"`` the value (listed in the exclusions with its reason, used nowhere)."""
    ff_percent_confirmed: bool = False
    """``units.ff = "percent"`` with every fat fraction within 0-1 is refused as a likely
    fraction; ``true`` confirms that the values really are percent (a cohort with almost no
    fat) and turns the refusal into a warning."""

    def ff_limits(self, ff_unit: str) -> tuple[float, float]:
        """The plausible fat-fraction range ``(low, high)`` in the declared unit: 0-100 %
        widened by the tolerances (in percentage points), or the same as a 0-1 fraction."""
        low, high = -self.ff_below_zero_tolerance, 100.0 + self.ff_above_100_tolerance
        return (low, high) if ff_unit == "percent" else (low / 100.0, high / 100.0)


DEFAULT_TITLE = "Untitled study"
DEFAULT_SEGMENT_MODEL = "aha17"
DEFAULT_FF_UNIT = "percent"
DEFAULT_FIELD_UNIT = "Hz"
DEFAULT_FIELD_REFERENCING = "subject-median"
"""Defaults of ``[study] title`` and ``segment_model``, ``[units] ff`` and ``field`` and
``[field] referencing`` (used by :class:`cohort.io.settings.StudySettings` and the flags)."""

FIELD_REFERENCING = ("none", "subject-median", "remote")
IMPLAUSIBLE = ("refuse", "exclude")
"""What ``[checks] implausible`` may say (see :attr:`Checks.implausible`)."""

CHECK_RULES: MappingProxyType[str, Rule] = MappingProxyType(
    {
        "ff_below_zero_tolerance": number(0.0, 100.0, note=" (percentage points)"),
        "ff_above_100_tolerance": number(0.0, 100.0, note=" (percentage points)"),
        "r2star_max": number(0.0, open_=True, note=" (1/s)"),
        "t2star_r2star_tolerance": number(0.0, 1.0, note=" (relative)"),
        "field_max_abs_hz": number(0.0, open_=True, note=" (Hz)"),
        "implausible": choice(IMPLAUSIBLE),
        "ff_percent_confirmed": flag(),
    }
)
"""Rules of the ``[checks]`` keys: every field of :class:`Checks` (a test keeps them equal)."""

STUDY_RULES: MappingProxyType[str, Rule] = MappingProxyType(
    {
        "title": text(),
        "values": text(),
        "subjects": text(),
        "reference": text(),
        "segment_model": choice(tuple(MODELS)),
        "groups": texts(),
        "group_labels": labels(),
        "methods": texts(min_items=1),
        "method_labels": labels(),
        "identifying_columns": texts(),
    }
)
UNITS_RULES: MappingProxyType[str, Rule] = MappingProxyType(
    {"ff": choice(FF_UNITS), "field": choice(FIELD_UNITS)}
)
UNITS_FIXED: MappingProxyType[str, str] = MappingProxyType(
    {
        "t2star": f"T2* is always read in {T2STAR_UNITS[0]} (parameter 't2star')",
        "r2star": f"R2* is always read in {R2STAR_UNITS[0]} (parameter 'r2star')",
    }
)
"""Unit keys that are known but have no choice: refused with the reason."""
FIELD_RULES: MappingProxyType[str, Rule] = MappingProxyType(
    {
        "referencing": choice(FIELD_REFERENCING),
        "remote_segments": integers(min(SEGMENTS), max(SEGMENTS), min_items=0),
    }
)


def _labels_problems(
    table: Mapping[str, Any], bad: frozenset[str], file: str, what: str
) -> list[Problem]:
    """Display labels of ``[study.<what>_labels]`` name entries of ``[study] <what>s`` (when
    that list is given)."""
    key, labels_key = f"{what}s", f"{what}_labels"
    if key in bad or labels_key in bad or not table.get(key):
        return []
    names = [g.strip() for g in table[key]]
    reference = table.get("reference")
    if what == "method" and isinstance(reference, str):
        names.append(reference.strip())  # the reference may have a label too
    return [
        study_problem(
            file,
            f"[study.{labels_key}] {name} labels a {what} that [study] {key} does not list "
            f"(it lists {names}; a misspelling may be in either key)",
            name,
            f"one of {names}",
        )
        for name in table.get(labels_key, {})
        if name not in names
    ]


def _check_study(
    table: Mapping[str, Any], bad: frozenset[str], file: str, document: Mapping[str, Any]
) -> list[Problem]:
    """Display labels name declared groups and methods (when declared); the methods listed
    are test methods, so the reference is not among them."""
    problems = _labels_problems(table, bad, file, "group")
    problems += _labels_problems(table, bad, file, "method")
    reference = table.get("reference")
    if "methods" not in bad and isinstance(reference, str):
        if reference.strip() in [m.strip() for m in table.get("methods", [])]:
            problems.append(
                study_problem(
                    file,
                    "[study] methods lists the reference; list the test methods only, in the "
                    "order outputs should show them",
                    reference,
                    "test methods only",
                )
            )
    return problems


def _check_field(
    table: Mapping[str, Any], bad: frozenset[str], file: str, document: Mapping[str, Any]
) -> list[Problem]:
    """Remote referencing needs remote segments, and they are segments of the model."""
    problems: list[Problem] = []
    study = document.get("study")
    model_name = (
        study.get("segment_model", DEFAULT_SEGMENT_MODEL)
        if isinstance(study, Mapping)
        else DEFAULT_SEGMENT_MODEL
    )
    model = MODELS.get(model_name) if isinstance(model_name, str) else None
    remote = [] if "remote_segments" in bad else list(table.get("remote_segments", []))
    if model is not None and any(s not in model for s in remote):
        problems.append(
            study_problem(
                file,
                f"[field] remote_segments names a segment outside the model '{model_name}'",
                remote,
                f"segment numbers of {model_name}",
            )
        )
    if table.get("referencing") == "remote" and not remote and "remote_segments" not in bad:
        problems.append(
            study_problem(
                file, "[field] referencing = 'remote' needs remote_segments", None,
                "a list of segment numbers",
            )
        )  # fmt: skip
    return problems


STUDY_SCHEMA = TableSchema(
    STUDY_RULES, required=("values", "subjects", "reference"), check=_check_study
)
UNITS_SCHEMA = TableSchema(UNITS_RULES, fixed=UNITS_FIXED)
FIELD_SCHEMA = TableSchema(FIELD_RULES, check=_check_field)
CHECKS_SCHEMA = TableSchema(CHECK_RULES)
"""Schemas of the ``[study]``, ``[units]``, ``[field]`` and ``[checks]`` tables."""


# --- the [analysis] table -----------------------------------------------------------------

DEFAULT_SEED = 20261202
"""Bootstrap seed unless the study file or ``--seed`` gives one (the date of this version)."""
DEFAULT_N_BOOT = 2000
"""Subject cluster bootstrap resamples: 1000-2000 are usual for percentile intervals (Efron
& Tibshirani 1993 (memory); common practice)."""
MIN_N_BOOT = 20
"""Fewest resamples accepted besides 0 (no bootstrap): below 20, even a 90 % percentile
interval has no resample beyond its limits (B x 0.05 < 1), so it is only the range of a
handful of draws. Useful intervals need far more (see :data:`DEFAULT_N_BOOT`)."""
MAX_N_BOOT = 1_000_000
"""A guard against typos (an extra zero or two): run time grows in proportion to B, and
percentile intervals are stable long before (common practice)."""
STRATA: tuple[str, ...] = ("all", "group", "ring", "territory")
"""Strata the agreement table knows: the whole cohort and the levels of each contract
column (used by ``cohort.analysis.agreement_table``)."""
RATIO_PARAMETERS: tuple[str, ...] = tuple(p for p in PARAMETERS if p != "field")
"""Parameters that may be analysed on the ratio (log) scale: not the field, which is signed
(referenced within subject), so that test/reference has no meaning."""
CORRECTIONS: tuple[str, ...] = ("holm", "fdr_bh")
"""Multiple-testing corrections offered in the study file (Holm; Benjamini-Hochberg)."""
PB_MAX_PAIRS = 500_000
"""Default of ``pb_max_pairs`` (``cohort.analysis.agreement_table.PB_TABLE_MAX_PAIRS`` is this)."""


@dataclass(frozen=True)
class RunOptions:
    """Analysis options; every one is recorded in the manifest and the methods text."""

    seed: int = DEFAULT_SEED
    n_boot: int = DEFAULT_N_BOOT
    confidence_level: float = 0.95
    strata: tuple[str, ...] = STRATA
    ratio_parameters: tuple[str, ...] = ("r2star",)
    error_ratio: float = 1.0
    regression_limits: bool = False
    correction: str = "holm"
    ccc_min: float = 0.9
    sensitivity_max: float = 0.8
    bias_ratio: float = 2.0
    pb_max_pairs: int = PB_MAX_PAIRS
    figures: bool = True
    workers: int = 0
    """Processes for the agreement rows and the figures (0 = one per core, at most 4); the
    results are the same for any number (:mod:`cohort.parallel`)."""

    def to_dict(self) -> dict[str, Any]:
        return {k: list(v) if isinstance(v, tuple) else v for k, v in asdict(self).items()}


def _n_boot_rule() -> Rule:
    def accepts(value: object) -> bool:
        return is_integer(value) and (value == 0 or MIN_N_BOOT <= value <= MAX_N_BOOT)  # type: ignore[operator]

    return Rule(
        f"0 (no bootstrap: analytic intervals only) or an integer from {MIN_N_BOOT} to "
        f"{MAX_N_BOOT} (fewer than {MIN_N_BOOT} resamples give no percentile interval)",
        accepts,
        "integer",
    )


ANALYSIS_RULES: MappingProxyType[str, Rule] = MappingProxyType(
    {
        "seed": integer(0, note=" (numpy seeds are non-negative)"),
        "n_boot": _n_boot_rule(),
        "confidence_level": number(0.0, 1.0, open_=True),
        "strata": texts(STRATA, min_items=1),
        "ratio_parameters": texts(RATIO_PARAMETERS),
        "error_ratio": number(0.0, open_=True),
        "regression_limits": flag(),
        "correction": choice(CORRECTIONS),
        "ccc_min": number(0.0, 1.0),
        "sensitivity_max": number(0.0, 1.0),
        "bias_ratio": number(1.0, note=" (bias in positive segments over bias elsewhere)"),
        "pb_max_pairs": integer(0),
        "workers": integer(0, note=" (0 = one per core)"),
    }
)
"""Rules of the ``[analysis]`` keys: every field of :class:`RunOptions` except ``figures``
(a command-line choice, ``--no-figures``)."""

OVERRIDE_RULES: MappingProxyType[str, Rule] = MappingProxyType(
    {**ANALYSIS_RULES, "figures": flag()}
)
"""Rules of the values a caller or the command line may override (every option)."""

OVERRIDE_FLAGS: MappingProxyType[str, str] = MappingProxyType(
    {"seed": "--seed", "n_boot": "--bootstrap", "workers": "--workers", "figures": "--no-figures"}
)
"""The ``cohort run`` flag of an override, to name it in a problem."""

ANALYSIS_SCHEMA = TableSchema(keys=ANALYSIS_RULES)
"""Schema of the ``[analysis]`` table (see :func:`cohort.domain.rules.check_document`)."""


COMMAND_LINE = "command line"
"""Where flags of ``cohort run`` are located in a problem."""


def override_options(
    options: RunOptions, *, where: str = COMMAND_LINE, **overrides: Any
) -> RunOptions:
    """``options`` with ``overrides`` (those not None), each checked by its rule.

    Raises :class:`StudyError` listing every invalid override, located at ``where`` (the
    command line, naming the flag where there is one, or the Python call that gave it);
    unknown override names are a programming error (TypeError).

    Examples
    --------
    >>> override_options(RunOptions(), n_boot=0, seed=None).n_boot
    0
    >>> override_options(RunOptions(), n_boot=5)
    Traceback (most recent call last):
    ...
    cohort.domain.problems.StudyError: ...option 'n_boot' (--bootstrap) is not valid...
    """
    given = {k: v for k, v in overrides.items() if v is not None}
    unknown = sorted(set(given) - set(OVERRIDE_RULES))
    if unknown:
        raise TypeError(f"unknown options {unknown}; known: {sorted(OVERRIDE_RULES)}")
    problems: list[Problem] = []
    for key, value in given.items():
        flag = OVERRIDE_FLAGS.get(key) if where == COMMAND_LINE else None
        flag_name = f" ({flag})" if flag else ""
        problems += check_value(where, f"option '{key}'{flag_name}", value, OVERRIDE_RULES[key])
    if problems:
        raise StudyError(problems)
    return replace(options, **{k: as_option(v, OVERRIDE_RULES[k]) for k, v in given.items()})


def as_option(value: Any, rule: Rule) -> Any:
    """A checked value as :class:`RunOptions` holds it (the rule's kind says which type).

    Examples
    --------
    >>> as_option(2, ANALYSIS_RULES["error_ratio"]), as_option([" all "], ANALYSIS_RULES["strata"])
    (2.0, ('all',))
    """
    if isinstance(value, list | tuple):
        return tuple(str(s).strip() for s in value)
    return {"integer": int, "number": float}.get(rule.kind, lambda v: v)(value)
