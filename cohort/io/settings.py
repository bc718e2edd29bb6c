"""Study settings: what a study file (``study.toml``) or the command-line flags declare.

A study file has these tables (all keys are optional except ``values``, ``subjects`` and
``reference``; paths are relative to the study file)::

    [study]
    title = "Two-scanner comparison"
    values = "values.csv"
    subjects = "subjects.csv"
    reference = "reference-fit"
    segment_model = "aha17"            # or "aha16"
    groups = ["control", "acute", "chronic"]   # order of groups in every output
    identifying_columns = ["hospital_number"]  # replaced by keyed codes when pseudonymised

    [study.group_labels]                 # optional display labels of declared groups
    control = "Healthy controls"

    [units]
    ff = "percent"                       # or "fraction" (0-1)
    field = "Hz"                         # or "ppm" (converted with the field strength)

    [field]
    referencing = "subject-median"       # "none", "subject-median" or "remote"
    remote_segments = [1, 2, 7, 8]       # with referencing = "remote"

    [checks]
    ff_below_zero_tolerance = 5.0        # percentage points below 0 accepted as noise (0-100)
    ff_above_100_tolerance = 5.0         # (0-100)
    r2star_max = 1000.0                  # 1/s (> 0); above this is implausible in myocardium
    t2star_r2star_tolerance = 0.01       # relative (0-1); T2* and R2* both given must agree
    field_max_abs_hz = 2000.0            # Hz (> 0); larger field offsets are implausible
    implausible = "refuse"               # or "exclude"
    ff_percent_confirmed = false         # true: fat fractions all within 0-1 really are percent

Tables ``[analysis]`` (:mod:`cohort.domain.options`) and ``[findings]``
(:mod:`cohort.domain.thresholds`)
are checked here too and kept as given in :attr:`StudySettings.extra` for the analysis.
Every table, key, type and range is in :data:`STUDY_FILE`; T2* is always read in ms and R2*
in 1/s, so ``[units]`` has no key for them.
"""

from __future__ import annotations

import os
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from types import MappingProxyType
from typing import Any

from cohort.domain.options import (
    ANALYSIS_SCHEMA,
    Rule,
    TableSchema,
    check_document,
    choice,
    did_you_mean,
    flag,
    integers,
    labels,
    number,
    study_problem,
    text,
    texts,
)
from cohort.domain.problems import Problem, StudyError
from cohort.domain.segments import MODELS, SEGMENTS
from cohort.domain.thresholds import FINDINGS_SCHEMA
from cohort.domain.units import FF_UNITS, FIELD_UNITS, R2STAR_UNITS, T2STAR_UNITS


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


@dataclass(frozen=True)
class StudySettings:
    """Everything a study declares. Paths are absolute once resolved."""

    values: Path
    subjects: Path
    reference: str
    title: str = "Untitled study"
    segment_model: str = "aha17"
    groups: tuple[str, ...] = ()
    group_labels: dict[str, str] = field(default_factory=dict)
    ff_unit: str = "percent"
    field_unit: str = "Hz"
    field_referencing: str = "subject-median"
    remote_segments: tuple[int, ...] = ()
    checks: Checks = field(default_factory=Checks)
    identifying_columns: tuple[str, ...] = ()
    """Extra input columns whose cells identify a person (e.g. a hospital number): with
    pseudonymisation every cell of them is replaced by its keyed code."""
    study_file: Path | None = None
    extra: dict[str, Any] = field(default_factory=dict)

    def with_options(self, **changes: Any) -> StudySettings:
        return replace(self, **changes)

    def input_name(self, path: Path | None) -> str | None:
        """How an output names an input file: relative to the study file's folder (POSIX
        separators), or its file name alone without a study file; never an absolute path."""
        if path is None:
            return None
        path = Path(path)
        if self.study_file is None:
            return path.name
        base = Path(self.study_file).resolve().parent
        return Path(os.path.relpath(path.resolve(), base)).as_posix()

    def to_dict(self, *, hide_paths: bool = False) -> dict[str, Any]:
        """Resolved settings as plain data (for the manifest and the report).

        Input files are named by :meth:`input_name`; with ``hide_paths`` (pseudonymised runs)
        not at all, since a file or folder name can hold an identifier.
        """

        def name(path: Path | None) -> str | None:
            return "(not recorded: pseudonymised run)" if hide_paths else self.input_name(path)

        return {
            "title": self.title,
            "study_file": name(self.study_file) if self.study_file else None,
            "values": name(self.values),
            "subjects": name(self.subjects),
            "reference": self.reference,
            "segment_model": self.segment_model,
            "groups": list(self.groups),
            "group_labels": dict(self.group_labels),
            "units": {"ff": self.ff_unit, "field": self.field_unit},
            "field": {
                "referencing": self.field_referencing,
                "remote_segments": list(self.remote_segments),
            },
            "checks": vars(self.checks).copy(),
            "identifying_columns": list(self.identifying_columns),
            **{k: v for k, v in self.extra.items()},
        }


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


def _check_study(
    table: Mapping[str, Any], bad: frozenset[str], file: str, document: Mapping[str, Any]
) -> list[Problem]:
    """Display labels name declared groups (when groups are declared)."""
    if "groups" in bad or "group_labels" in bad or not table.get("groups"):
        return []
    groups = [g.strip() for g in table["groups"]]
    return [
        study_problem(
            file,
            f"[study.group_labels] {name} labels a group that is not declared in [study] "
            f"groups{did_you_mean(name, groups)}",
            name,
            f"one of {groups}",
        )
        for name in table.get("group_labels", {})
        if name not in groups
    ]


def _check_field(
    table: Mapping[str, Any], bad: frozenset[str], file: str, document: Mapping[str, Any]
) -> list[Problem]:
    """Remote referencing needs remote segments, and they are segments of the model."""
    problems: list[Problem] = []
    study = document.get("study")
    model_name = study.get("segment_model", "aha17") if isinstance(study, Mapping) else "aha17"
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


STUDY_FILE: MappingProxyType[str, TableSchema] = MappingProxyType(
    {
        "study": TableSchema(
            STUDY_RULES, required=("values", "subjects", "reference"), check=_check_study
        ),
        "units": TableSchema(UNITS_RULES, fixed=UNITS_FIXED),
        "field": TableSchema(FIELD_RULES, check=_check_field),
        "checks": TableSchema(CHECK_RULES),
        "analysis": ANALYSIS_SCHEMA,
        "findings": FINDINGS_SCHEMA,
    }
)
"""Every table a study file may hold, with the rules of its keys: the one place where the
study file's format is checked (:func:`cohort.domain.options.check_document`)."""
LATER_TABLES = ("analysis", "findings")
"""Tables interpreted by the analysis (kept in :attr:`StudySettings.extra`)."""


def _unreadable(path: Path, detail: str) -> StudyError:
    return StudyError([Problem("file-unreadable", detail, file=str(path))])


def _read_text(path: Path) -> str:
    """The text of a study file; StudyError if it is missing, a folder, binary or not UTF-8."""
    if not path.exists():
        raise StudyError([Problem("file-missing", "study file not found", file=str(path))])
    if path.is_dir():
        raise _unreadable(path, "is a folder, not a study file")
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise _unreadable(path, f"study file cannot be read: {exc.strerror or exc}") from None
    if b"\x00" in raw:
        raise _unreadable(path, "is a binary file, not a study file (TOML text)")
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise _unreadable(
            path, f"study file is not UTF-8 text (byte {exc.start}); save it as UTF-8"
        ) from None


def read_study_file(path: str | Path) -> StudySettings:
    """Read and check a ``study.toml``: every table and key, at once.

    Raises :class:`StudyError` listing every problem of every table (unknown tables and keys
    with a did-you-mean hint, wrong types, values out of range; see :data:`STUDY_FILE`).
    """
    path = Path(path)
    try:
        data = tomllib.loads(_read_text(path))
    except tomllib.TOMLDecodeError as exc:
        raise StudyError(
            [Problem("study-file", f"not valid TOML: {exc}", file=str(path))]
        ) from None
    problems = check_document(data, STUDY_FILE, str(path))
    if problems:
        raise StudyError(problems)
    return _settings(
        data,
        base=path.parent.resolve(),
        study_file=path.resolve(),
        extra={k: data[k] for k in LATER_TABLES if k in data},
    )


def _settings(
    document: Mapping[str, Any],
    *,
    base: Path | None,
    study_file: Path | None,
    extra: dict[str, Any],
) -> StudySettings:
    """:class:`StudySettings` of a checked document (paths relative to ``base``)."""
    study = document["study"]
    units = document.get("units", {})
    fieldopts = document.get("field", {})
    checks = {
        k: float(v) if CHECK_RULES[k].kind == "number" else v
        for k, v in document.get("checks", {}).items()
    }

    def where(name: str) -> Path:
        return base / name if base is not None else Path(name)

    return StudySettings(
        values=where(study["values"]),
        subjects=where(study["subjects"]),
        reference=study["reference"].strip(),
        title=study.get("title", "Untitled study"),
        segment_model=study.get("segment_model", "aha17"),
        groups=tuple(g.strip() for g in study.get("groups", ())),
        group_labels={str(k): str(v) for k, v in study.get("group_labels", {}).items()},
        ff_unit=units.get("ff", "percent"),
        field_unit=units.get("field", "Hz"),
        field_referencing=fieldopts.get("referencing", "subject-median"),
        remote_segments=tuple(int(s) for s in fieldopts.get("remote_segments", ())),
        checks=Checks(**checks),
        identifying_columns=tuple(c.strip() for c in study.get("identifying_columns", ())),
        study_file=study_file,
        extra=extra,
    )


def _number_text(value: object) -> object:
    """Segment numbers given as text (flags) as integers; anything else unchanged."""
    if isinstance(value, str) and value.strip().isdigit():
        return int(value)
    return value


def build_settings(
    *,
    values: str | Path,
    subjects: str | Path,
    reference: str,
    title: str = "Untitled study",
    segment_model: str = "aha17",
    groups: Any = (),
    group_labels: Any = None,
    ff_unit: str = "percent",
    field_unit: str = "Hz",
    field_referencing: str = "subject-median",
    remote_segments: Any = (),
    checks: Any = None,
    identifying_columns: Any = (),
    study_file: Path | None = None,
    extra: dict[str, Any] | None = None,
    source: str = "command line",
) -> StudySettings:
    """Check option values and build :class:`StudySettings` (the flag form, or a notebook).

    The values obey the rules of the study file (:data:`STUDY_FILE`); problems are located
    at ``source`` and raised together as one :class:`StudyError`.
    """
    if isinstance(checks, Checks):
        checks = vars(checks)
    if isinstance(remote_segments, list | tuple):
        remote_segments = [_number_text(s) for s in remote_segments]
    study: dict[str, Any] = {
        "title": title,
        "values": str(values) if isinstance(values, Path) else values,
        "subjects": str(subjects) if isinstance(subjects, Path) else subjects,
        "reference": reference,
        "segment_model": segment_model,
        "groups": list(groups) if isinstance(groups, tuple) else groups,
        "identifying_columns": (
            list(identifying_columns)
            if isinstance(identifying_columns, tuple)
            else identifying_columns
        ),
    }
    if group_labels:
        study["group_labels"] = group_labels
    document: dict[str, Any] = {
        "study": study,
        "units": {"ff": ff_unit, "field": field_unit},
        "field": {"referencing": field_referencing, "remote_segments": remote_segments},
        "checks": dict(checks or {}),
        **dict(extra or {}),
    }
    problems = check_document(document, STUDY_FILE, source)
    if problems:
        raise StudyError(problems)
    return _settings(document, base=None, study_file=study_file, extra=dict(extra or {}))
