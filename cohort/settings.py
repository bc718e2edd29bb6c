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

    [study.group_labels]                 # optional display labels
    control = "Healthy controls"

    [units]
    ff = "percent"                       # or "fraction" (0-1)
    field = "Hz"                         # or "ppm" (converted with the field strength)

    [field]
    referencing = "subject-median"       # "none", "subject-median" or "remote"
    remote_segments = [1, 2, 7, 8]       # with referencing = "remote"

    [checks]
    ff_below_zero_tolerance = 5.0        # percentage points below 0 accepted as noise
    ff_above_100_tolerance = 5.0
    r2star_max = 1000.0                  # 1/s; above this is implausible in myocardium
    t2star_r2star_tolerance = 0.01       # relative; T2* and R2* both given must agree
    field_max_abs_hz = 2000.0            # Hz; larger field offsets are implausible

Tables read by later stages (``[analysis]``, ``[findings]``, ``[report]``) are kept as
given in :attr:`StudySettings.extra` for them to interpret.
"""

from __future__ import annotations

import os
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from .problems import Problem, StudyError
from .segments import MODELS
from .units import FF_UNITS, FIELD_UNITS

FIELD_REFERENCING = ("none", "subject-median", "remote")
LATER_TABLES = ("analysis", "findings", "report")


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


_KNOWN = {
    "study": {
        "title",
        "values",
        "subjects",
        "reference",
        "segment_model",
        "groups",
        "group_labels",
    },
    "units": {"ff", "field", "t2star", "r2star"},
    "field": {"referencing", "remote_segments"},
    "checks": set(Checks.__dataclass_fields__),
}


def _problem(path: Path, detail: str, value: object = None, expected: str | None = None) -> Problem:
    return Problem(
        "study-option",
        detail,
        file=str(path),
        value=None if value is None else str(value),
        expected=expected,
    )


def read_study_file(path: str | Path) -> StudySettings:
    """Read and check a ``study.toml``; raise :class:`StudyError` listing every problem."""
    path = Path(path)
    if not path.is_file():
        raise StudyError([Problem("file-missing", "study file not found", file=str(path))])
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8-sig"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise StudyError(
            [Problem("study-file", f"not valid TOML: {exc}", file=str(path))]
        ) from None
    problems: list[Problem] = []
    for table, content in data.items():
        if table in LATER_TABLES:
            continue
        if table not in _KNOWN:
            problems.append(
                _problem(path, f"unknown table [{table}]", table, f"one of {sorted(_KNOWN)}")
            )
            continue
        if not isinstance(content, dict):
            problems.append(_problem(path, f"[{table}] must be a table", content))
            continue
        for key in content:
            if key not in _KNOWN[table]:
                problems.append(
                    _problem(
                        path,
                        f"unknown key '{key}' in [{table}]",
                        key,
                        f"one of {sorted(_KNOWN[table])}",
                    )
                )
    study = data.get("study", {}) if isinstance(data.get("study", {}), dict) else {}
    for key in ("values", "subjects", "reference"):
        if not isinstance(study.get(key), str) or not study.get(key, "").strip():
            problems.append(
                _problem(path, f"[study] needs '{key}'", study.get(key), "a text value")
            )
    if problems:
        raise StudyError(problems)
    base = path.parent.resolve()
    units = data.get("units", {})
    fieldopts = data.get("field", {})
    checks = data.get("checks", {})
    settings = build_settings(
        values=base / study["values"],
        subjects=base / study["subjects"],
        reference=study["reference"],
        title=study.get("title", "Untitled study"),
        segment_model=study.get("segment_model", "aha17"),
        groups=study.get("groups", ()),
        group_labels=study.get("group_labels", {}),
        ff_unit=units.get("ff", "percent"),
        field_unit=units.get("field", "Hz"),
        field_referencing=fieldopts.get("referencing", "subject-median"),
        remote_segments=fieldopts.get("remote_segments", ()),
        checks=checks,
        study_file=path.resolve(),
        extra={k: data[k] for k in LATER_TABLES if k in data},
        source=str(path),
    )
    return settings


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
    study_file: Path | None = None,
    extra: dict[str, Any] | None = None,
    source: str = "command line",
) -> StudySettings:
    """Check option values and build :class:`StudySettings` (used by the file and the flags)."""
    where = Path(source)
    problems: list[Problem] = []

    def choice(name: str, value: object, allowed: tuple[str, ...]) -> None:
        if value not in allowed:
            problems.append(
                _problem(where, f"'{name}' is not valid", value, f"one of {list(allowed)}")
            )

    choice("segment_model", segment_model, tuple(MODELS))
    choice("units.ff", ff_unit, FF_UNITS)
    choice("units.field", field_unit, FIELD_UNITS)
    choice("field.referencing", field_referencing, FIELD_REFERENCING)
    if isinstance(groups, str) or not all(isinstance(g, str) and g.strip() for g in groups):
        problems.append(
            _problem(where, "'groups' must be a list of names", groups, "a list of text")
        )
        groups = ()
    groups = tuple(g.strip() for g in groups)
    if len(set(groups)) != len(groups):
        problems.append(_problem(where, "'groups' names a group twice", list(groups)))
    labels = dict(group_labels or {})
    remote: tuple[int, ...] = ()
    try:
        remote = tuple(int(s) for s in remote_segments)
    except (TypeError, ValueError):
        problems.append(
            _problem(where, "'remote_segments' must be segment numbers", remote_segments)
        )
    model = MODELS.get(segment_model)
    if model is not None and any(s not in model for s in remote):
        problems.append(
            _problem(where, "'remote_segments' names a segment outside the model", list(remote))
        )
    if field_referencing == "remote" and not remote:
        problems.append(
            _problem(where, "field.referencing = 'remote' needs 'remote_segments'", None)
        )
    check_values = Checks()
    if checks:
        try:
            check_values = Checks(**{k: float(v) for k, v in dict(checks).items()})
        except (TypeError, ValueError) as exc:
            problems.append(_problem(where, f"[checks] is not valid: {exc}", checks))
    if not isinstance(reference, str) or not reference.strip():
        problems.append(_problem(where, "a reference method must be named", reference))
    if problems:
        raise StudyError(problems)
    return StudySettings(
        values=Path(values),
        subjects=Path(subjects),
        reference=reference.strip(),
        title=str(title),
        segment_model=segment_model,
        groups=groups,
        group_labels={str(k): str(v) for k, v in labels.items()},
        ff_unit=ff_unit,
        field_unit=field_unit,
        field_referencing=field_referencing,
        remote_segments=remote,
        checks=check_values,
        study_file=study_file,
        extra=dict(extra or {}),
    )
