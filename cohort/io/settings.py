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
    methods = ["net-full", "quickmap"]  # test methods in the order of every output
    identifying_columns = ["hospital_number"]  # replaced by keyed codes when pseudonymised

    [study.group_labels]                 # optional display labels of declared groups
    control = "Healthy controls"

    [study.method_labels]                # optional display labels of listed methods
    quickmap = "Fast three-echo fit"

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

    [acceptance.limits]                  # criteria set in advance (cohort.domain.acceptance)
    ff = 3.0                             # both limits of agreement within +/- 3 pp
    [acceptance.findings]
    hemorrhage = 0.8                     # segment-level sensitivity at least 0.8

Tables ``[analysis]`` (:mod:`cohort.domain.options`), ``[findings]``
(:mod:`cohort.domain.thresholds`) and ``[acceptance]`` (:mod:`cohort.domain.acceptance`) are
part of it. This module is the one place that parses a
study file: :func:`read_study_file` (and :func:`build_settings`, the same from flags or a
notebook) checks every table at once, listing every problem of every table in one
:class:`StudyError`, and returns a complete, typed :class:`StudySettings` holding the
analysis options (:class:`RunOptions`), the finding definitions and the swap-screen
options; later stages take these objects and never read a table again. Every table, key,
type and range is in :data:`STUDY_FILE`; T2* is always read in ms and R2* in 1/s, so
``[units]`` has no key for them.
"""

from __future__ import annotations

import os
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from types import MappingProxyType
from typing import Any

from cohort.domain.acceptance import Acceptance
from cohort.domain.options import (
    ANALYSIS_RULES,
    ANALYSIS_SCHEMA,
    CHECK_RULES,
    CHECKS_SCHEMA,
    DEFAULT_FF_UNIT,
    DEFAULT_FIELD_REFERENCING,
    DEFAULT_FIELD_UNIT,
    DEFAULT_SEGMENT_MODEL,
    DEFAULT_TITLE,
    FIELD_SCHEMA,
    STUDY_SCHEMA,
    UNITS_SCHEMA,
    Checks,
    RunOptions,
    as_option,
)
from cohort.domain.problems import Problem, StudyError
from cohort.domain.rules import TableSchema, check_document
from cohort.domain.thresholds import DEFAULT_FINDINGS, FindingDefinition, SwapOptions
from cohort.io.acceptance_table import ACCEPTANCE_SCHEMA, build_acceptance
from cohort.io.findings_table import FINDINGS_SCHEMA, build_findings


@dataclass(frozen=True)
class StudySettings:
    """Everything a study declares, checked and typed. Paths are absolute once resolved."""

    values: Path
    subjects: Path
    reference: str
    title: str = DEFAULT_TITLE
    segment_model: str = DEFAULT_SEGMENT_MODEL
    groups: tuple[str, ...] = ()
    group_labels: dict[str, str] = field(default_factory=dict)
    methods: tuple[str, ...] = ()
    """Test methods in the order every output shows them (empty: order of first appearance
    in the values table)."""
    method_labels: dict[str, str] = field(default_factory=dict)
    """Display labels of methods (figures, overview, alerts, methods text); tables keep the
    method names of the values table."""
    ff_unit: str = DEFAULT_FF_UNIT
    field_unit: str = DEFAULT_FIELD_UNIT
    field_referencing: str = DEFAULT_FIELD_REFERENCING
    remote_segments: tuple[int, ...] = ()
    checks: Checks = field(default_factory=Checks)
    identifying_columns: tuple[str, ...] = ()
    """Extra input columns whose cells identify a person (e.g. a hospital number): with
    pseudonymisation every cell of them is replaced by its keyed code."""
    options: RunOptions = field(default_factory=RunOptions)
    """The ``[analysis]`` table: options of the analysis (overridable per run)."""
    findings: tuple[FindingDefinition, ...] = DEFAULT_FINDINGS
    """The ``[findings]`` table: the findings to evaluate."""
    swap: SwapOptions = field(default_factory=SwapOptions)
    """The ``[findings]`` table: options of the fat-water swap screen."""
    acceptance: Acceptance = field(default_factory=Acceptance)
    """The ``[acceptance]`` table: criteria set in advance (none unless declared)."""
    study_file: Path | None = None
    as_written: Mapping[str, Any] = field(default_factory=dict)
    """The ``[analysis]``, ``[findings]`` and ``[acceptance]`` tables as the study file gave
    them: recorded in the manifest only (the parsed forms are :attr:`options`,
    :attr:`findings`, :attr:`swap`, :attr:`acceptance`)."""

    def with_options(self, **changes: Any) -> StudySettings:
        return replace(self, **changes)

    def input_name(self, path: Path | None) -> str | None:
        """How an output names an input file: relative to the study file's folder (POSIX
        separators), or its file name alone without a study file; never an absolute path.

        Examples
        --------
        >>> here = Path("/data/study").resolve()
        >>> s = StudySettings(here / "v.csv", here / "s.csv", "ref", study_file=here / "study.toml")
        >>> s.input_name(here / "tables" / "values.csv"), s.input_name(None)
        ('tables/values.csv', None)
        """
        if path is None:
            return None
        path = Path(path)
        if self.study_file is None:
            return path.name
        base = Path(self.study_file).resolve().parent
        return Path(os.path.relpath(path.resolve(), base)).as_posix()

    @property
    def source_name(self) -> str:
        """Where problems of the settings are located: the study file, as outputs name it."""
        return self.input_name(self.study_file) or "study settings"

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
            "methods": list(self.methods),
            "method_labels": dict(self.method_labels),
            "units": {"ff": self.ff_unit, "field": self.field_unit},
            "field": {
                "referencing": self.field_referencing,
                "remote_segments": list(self.remote_segments),
            },
            "checks": vars(self.checks).copy(),
            "identifying_columns": list(self.identifying_columns),
            **dict(self.as_written),
        }


STUDY_FILE: MappingProxyType[str, TableSchema] = MappingProxyType(
    {
        "study": STUDY_SCHEMA,
        "units": UNITS_SCHEMA,
        "field": FIELD_SCHEMA,
        "checks": CHECKS_SCHEMA,
        "analysis": ANALYSIS_SCHEMA,
        "findings": FINDINGS_SCHEMA,
        "acceptance": ACCEPTANCE_SCHEMA,
    }
)
"""Every table a study file may hold, with the rules of its keys: the one place where the
study file's format is checked (:func:`cohort.domain.rules.check_document`)."""
RECORDED_TABLES = ("analysis", "findings", "acceptance")
"""Tables recorded as written in the manifest (:attr:`StudySettings.as_written`)."""


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

    Examples
    --------
    >>> import tempfile
    >>> from cohort.demo import write_demo
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     settings = read_study_file(write_demo(folder, n_subjects=6))
    >>> settings.reference, settings.options.n_boot, [d.name for d in settings.findings]
    ('reference-fit', 2000, ['hemorrhage', 'fat'])
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
    return _settings(data, base=path.parent.resolve(), study_file=path.resolve())


def _settings(
    document: Mapping[str, Any], *, base: Path | None, study_file: Path | None
) -> StudySettings:
    """:class:`StudySettings` of a checked document (paths relative to ``base``)."""
    study = document["study"]
    units = document.get("units", {})
    fieldopts = document.get("field", {})
    checks = {k: as_option(v, CHECK_RULES[k]) for k, v in document.get("checks", {}).items()}
    findings, swap = build_findings(document.get("findings"), str(study_file or "settings"))

    def where(name: str) -> Path:
        return base / name if base is not None else Path(name)

    return StudySettings(
        values=where(study["values"]),
        subjects=where(study["subjects"]),
        reference=study["reference"].strip(),
        title=study.get("title", DEFAULT_TITLE),
        segment_model=study.get("segment_model", DEFAULT_SEGMENT_MODEL),
        groups=tuple(g.strip() for g in study.get("groups", ())),
        group_labels={str(k): str(v) for k, v in study.get("group_labels", {}).items()},
        methods=tuple(m.strip() for m in study.get("methods", ())),
        method_labels={str(k): str(v) for k, v in study.get("method_labels", {}).items()},
        ff_unit=units.get("ff", DEFAULT_FF_UNIT),
        field_unit=units.get("field", DEFAULT_FIELD_UNIT),
        field_referencing=fieldopts.get("referencing", DEFAULT_FIELD_REFERENCING),
        remote_segments=tuple(int(s) for s in fieldopts.get("remote_segments", ())),
        checks=Checks(**checks),
        identifying_columns=tuple(c.strip() for c in study.get("identifying_columns", ())),
        options=_run_options(document.get("analysis", {})),
        findings=findings,
        swap=swap,
        acceptance=build_acceptance(document.get("acceptance")),
        study_file=study_file,
        as_written={k: document[k] for k in RECORDED_TABLES if k in document},
    )


def _run_options(table: Mapping[str, Any]) -> RunOptions:
    """:class:`RunOptions` of a checked ``[analysis]`` table (defaults for keys not given)."""
    return replace(RunOptions(), **{k: as_option(v, ANALYSIS_RULES[k]) for k, v in table.items()})


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
    title: str = DEFAULT_TITLE,
    segment_model: str = DEFAULT_SEGMENT_MODEL,
    groups: Any = (),
    group_labels: Any = None,
    methods: Any = (),
    method_labels: Any = None,
    ff_unit: str = DEFAULT_FF_UNIT,
    field_unit: str = DEFAULT_FIELD_UNIT,
    field_referencing: str = DEFAULT_FIELD_REFERENCING,
    remote_segments: Any = (),
    checks: Any = None,
    identifying_columns: Any = (),
    study_file: Path | None = None,
    tables: Mapping[str, Any] | None = None,
    source: str = "command line",
) -> StudySettings:
    """Check option values and build :class:`StudySettings` (the flag form, or a notebook).

    The values obey the rules of the study file (:data:`STUDY_FILE`); ``tables`` may give the
    ``[analysis]``, ``[findings]`` and ``[acceptance]`` tables as a study file would. Problems
    are located at ``source`` and raised together as one :class:`StudyError`.

    Examples
    --------
    >>> s = build_settings(values="v.csv", subjects="s.csv", reference="ref",
    ...                    tables={"analysis": {"n_boot": 0}})
    >>> s.values.name, s.options.n_boot, s.field_referencing
    ('v.csv', 0, 'subject-median')
    >>> build_settings(values="v.csv", subjects="s.csv", reference="ref", ff_unit="permille")
    Traceback (most recent call last):
    ...
    cohort.domain.problems.StudyError: ...[units] ff is not valid...
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
    if methods:
        study["methods"] = list(methods) if isinstance(methods, tuple) else methods
    if method_labels:
        study["method_labels"] = method_labels
    document: dict[str, Any] = {
        "study": study,
        "units": {"ff": ff_unit, "field": field_unit},
        "field": {"referencing": field_referencing, "remote_segments": remote_segments},
        "checks": dict(checks or {}),
        **dict(tables or {}),
    }
    problems = check_document(document, STUDY_FILE, source)
    if problems:
        raise StudyError(problems)
    return _settings(document, base=None, study_file=study_file)
