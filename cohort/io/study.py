"""A loaded study: checked, harmonised, paired tables ready for analysis.

``load_study`` reads both tables, checks them (collecting every problem), converts values to
the canonical units of :mod:`cohort.domain.units`, references field maps within each subject, pairs
each test method with the reference, and accounts for every input record: each is *used*,
*missing* (blank cell) or *excluded* with a reason, and the counts reconcile. An excluded
value enters no analysis: :attr:`Study.values` and :attr:`Study.paired` hold the used
values only, and field maps are referenced with the paired values only.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd

from cohort.domain.problems import Problem, ProblemLog, StudyError
from cohort.domain.segments import SEGMENTS, segment_model
from cohort.domain.units import PARAMETERS, fraction_to_percent, ppm_to_hz, t2star_ms_to_r2star
from cohort.io.loading import ROW, read_table
from cohort.io.method_order import method_order, method_problems, ordered_methods
from cohort.io.settings import StudySettings, read_study_file
from cohort.io.subject_checks import check_subjects
from cohort.io.validation import PER_CODE, check_across
from cohort.io.value_checks import (
    IMPLAUSIBLE,
    check_values,
    flag_field,
    report_excluded_implausible,
)

PAIRED_COLUMNS = (
    "parameter", "method", "reference", "subject", "group", "field_strength",
    "segment", "segment_name", "ring", "territory", "reference_value", "test_value",
)  # fmt: skip
"""Columns of :attr:`Study.paired`, in order."""

RECORD_COLUMNS = (
    "source_file", "source_row", "source_column", "subject", "method", "segment",
    "input_parameter", "parameter", "value_text", "input_value", "value", "status", "reason",
)  # fmt: skip
"""Columns of :attr:`Study.records`: one row per value cell of the values table."""


@dataclass
class Study:
    """A checked study. All tables are tidy pandas DataFrames.

    Attributes
    ----------
    settings : the resolved :class:`~cohort.io.settings.StudySettings`.
    subjects : one row per subject (``subject, group, field_strength`` and covariates).
    values : canonical values of the used records only, one row per (subject, method,
        segment, parameter): ff in %, r2star in 1/s, field in Hz referenced within subject
        and method. Every row entered a pair; an excluded value is in no analysis table.
    paired : test-method values beside the reference, see :data:`PAIRED_COLUMNS`.
    records : every input value cell with its status (used / missing / excluded) and reason.
    warnings : problems that did not stop the study (each says what was done).
    """

    settings: StudySettings
    subjects: pd.DataFrame
    values: pd.DataFrame
    paired: pd.DataFrame
    records: pd.DataFrame
    warnings: list[Problem] = field(default_factory=list)

    def __repr__(self) -> str:
        return (
            f"<Study {self.settings.title!r}: {len(self.subjects)} subjects, reference "
            f"{self.reference!r}, test methods {list(self.test_methods)}, {len(self.paired)} "
            f"pairs, {len(self.warnings)} warnings; .summary() for more>"
        )

    @property
    def reference(self) -> str:
        return self.settings.reference

    @property
    def methods(self) -> tuple[str, ...]:
        """All methods, the reference first, then the test methods in the study's order
        (``[study] methods``, else their first appearance; :mod:`cohort.io.method_order`)."""
        return method_order(self.values["method"].unique(), self.reference, self.settings.methods)

    def method_label(self, method: object) -> str:
        """The display label of a method (``[study.method_labels]``), else its name."""
        return self.settings.method_labels.get(str(method), str(method))

    def group_label(self, group: object) -> str:
        """The display label of a group (``[study.group_labels]``), else its name."""
        return self.settings.group_labels.get(str(group), str(group))

    @property
    def test_methods(self) -> tuple[str, ...]:
        return self.methods[1:]

    @property
    def parameters(self) -> tuple[str, ...]:
        present = set(self.values["parameter"].unique())
        return tuple(p for p in PARAMETERS if p in present)

    @property
    def groups(self) -> tuple[str, ...]:
        present = self.subjects["group"].unique()  # in order of first appearance
        if self.settings.groups:
            found = set(present)
            return tuple(g for g in self.settings.groups if g in found)
        return tuple(dict.fromkeys(present))

    def exclusions(self) -> pd.DataFrame:
        """Input records not used in any comparison, each with its reason."""
        return self.records[self.records["status"] != "used"].reset_index(drop=True)

    def accounting(self) -> dict[str, int]:
        """Counts of input records by status; ``records_in`` equals the sum of the others."""
        counts = self.records["status"].value_counts()
        result = {"records_in": len(self.records)}
        for status in ("used", "missing", "excluded"):
            result[status] = int(counts.get(status, 0))
        if result["records_in"] != result["used"] + result["missing"] + result["excluded"]:
            raise RuntimeError("record accounting does not reconcile")  # internal invariant
        return result

    def missing_values(self) -> pd.DataFrame:
        """Blank cells counted per method, segment and parameter."""
        rec = self.records[self.records["status"] == "missing"]
        table = (
            rec.groupby(["method", "input_parameter", "segment"], dropna=False)
            .size()
            .rename("n_missing")
            .reset_index()
            .rename(columns={"input_parameter": "parameter"})
        )
        return table

    def coverage(self) -> pd.DataFrame:
        """Subjects with a usable value, per method, parameter and segment."""
        return (
            self.values.groupby(["method", "parameter", "segment"])["subject"]
            .nunique()
            .rename("n_subjects")
            .reset_index()
        )

    def summary(self) -> str:
        """A compact text summary (what ``cohort check`` prints)."""
        s = self.settings
        lines = [f"Study: {s.title}"]
        lines.append(
            f"  {len(self.subjects)} subjects; reference method {self.reference!r}; "
            f"compared: {', '.join(repr(m) for m in self.test_methods)}"
        )
        table = self.subjects.groupby(["group", "field_strength"]).size().unstack(fill_value=0)
        table = table.reindex(list(self.groups))
        table.columns = [f"{c:g} T" for c in table.columns]
        table.index.name = None
        lines.append("  subjects per group and field strength:")
        lines += ["    " + line for line in table.to_string().splitlines()]
        model = segment_model(s.segment_model)
        lines.append(
            f"  segment model {model.name} ({len(model.numbers)} segments); "
            f"parameters: {', '.join(self.parameters)}"
        )
        n_subj = len(self.subjects)
        cov = self.coverage()
        lines.append("  coverage (segments with a value / in every subject; values):")
        for method in self.methods:
            for parameter in self.parameters:
                part = cov[cov["method"].eq(method) & cov["parameter"].eq(parameter)]
                full = int((part["n_subjects"] == n_subj).sum())
                lines.append(
                    f"    {method} / {parameter}: {len(part)} / {full} segments; "
                    f"{part['n_subjects'].sum()} values"
                )
        counts = self.accounting()
        lines.append(
            f"  input values: {counts['records_in']} = {counts['used']} used + "
            f"{counts['missing']} missing (blank) + {counts['excluded']} excluded"
        )
        missing = self.missing_values()
        if len(missing):
            by = missing.groupby(["method", "parameter"], sort=False)["n_missing"].sum()
            lines.append(
                "    missing (blank) by method and parameter: "
                + ", ".join(f"{m} {p} {n}" for (m, p), n in by.items())
            )
        excluded = self.exclusions().query("status == 'excluded'")
        reasons = excluded["reason"].astype(str).value_counts()  # text: no empty categories
        lines += [f"    excluded: {n} x {reason}" for reason, n in reasons.items()]
        lines.append(
            f"  field maps referenced: {s.field_referencing}"
            + (f" (segments {list(s.remote_segments)})" if s.field_referencing == "remote" else "")
        )
        if self.warnings:
            lines.append(f"  {len(self.warnings)} warning(s):")
            lines += [f"    - {w}" for w in self.warnings]
        else:
            lines.append("  no warnings")
        return "\n".join(lines)


def load_study(source: str | Path | StudySettings) -> Study:
    """Load and check a study from a ``study.toml`` path or from :class:`StudySettings`.

    Raises :class:`~cohort.domain.problems.StudyError` listing every problem found. Problems and
    records name an input file as :meth:`StudySettings.input_name` gives it (relative to the
    study file), never by an absolute path.

    Examples
    --------
    >>> import tempfile
    >>> from cohort.demo import write_demo
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     study = load_study(write_demo(folder, n_subjects=6))
    >>> list(study.paired.columns[:4])
    ['parameter', 'method', 'reference', 'subject']
    >>> dict(sorted(study.records["status"].value_counts().items()))  # every input value
    {'missing': 3, 'used': 1221}
    """
    settings = source if isinstance(source, StudySettings) else read_study_file(source)
    log = ProblemLog()
    raws = {}
    for key, path in (("values", settings.values), ("subjects", settings.subjects)):
        name = settings.input_name(path) or str(path)
        try:
            raw = read_table(path)
        except StudyError as exc:
            log.problems.extend(_named(exc.problems, name))
            continue
        raws[key] = replace(raw, name=name, warnings=_named(raw.warnings, name))
        log.problems.extend(raws[key].warnings)
    if "values" not in raws or "subjects" not in raws:
        log.raise_if_errors()
    values_raw, subjects_raw = raws["values"], raws["subjects"]
    values = check_values(values_raw, settings, log)
    subjects = check_subjects(subjects_raw, settings, log)
    if values is not None and subjects is not None:
        check_across(values, subjects, settings, log, values_raw.name, subjects_raw.name)
        _check_named_methods(values, settings, log)
    log.raise_if_errors()
    assert values is not None and subjects is not None  # guaranteed by raise_if_errors
    subjects = subjects.drop(columns=[ROW]).reset_index(drop=True)
    records = _harmonise(values, subjects, settings, log, values_raw.name)
    log.raise_if_errors()
    shift = _settle(records, settings)
    canonical = _canonical_values(records, subjects, shift)
    order = method_order(canonical["method"], settings.reference, settings.methods)
    paired = _pair(canonical, settings.reference, order)
    n_test = int((records["status"].eq("used") & records["method"].ne(settings.reference)).sum())
    if len(paired) != n_test:
        raise RuntimeError("a used test value did not enter exactly one pair")  # invariant
    for frame in (records, canonical, paired):
        _compact(frame)
    ordered_methods(canonical, order)
    ordered_methods(paired, order[1:])
    return Study(settings, subjects, canonical, paired, records, log.warnings)


def check_study(source: str | Path | StudySettings) -> Study:
    """Read and check a study without analysing it (what ``cohort check`` does): the same
    as :func:`load_study`, named for the step a script takes before any analysis.

    Every check runs and nothing is written. Returns the checked
    :class:`Study` (its :meth:`Study.summary` is what ``cohort check`` prints) or raises
    :class:`~cohort.domain.problems.StudyError` listing every problem of the study file and
    of both tables.

    Examples
    --------
    >>> import tempfile
    >>> from cohort.demo import write_demo
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     study = check_study(write_demo(folder, n_subjects=6))
    >>> len(study.subjects), study.reference, study.test_methods
    (6, 'reference-fit', ('net-full', 'quickmap', 'net-mag1'))
    """
    return load_study(source)


def _check_named_methods(values: pd.DataFrame, settings: StudySettings, log: ProblemLog) -> None:
    """Methods the study file names (``[study] methods`` and ``method_labels``,
    ``[findings] magnitude_only_methods``, ``[acceptance] baseline``) must be test methods
    of the values table: found when the study is checked, not after the analysis."""
    log.problems.extend(
        method_problems(
            values["method"].astype(str),
            settings.reference,
            settings.methods,
            settings.method_labels,
            settings.acceptance.baseline,
            settings.source_name,
        )
    )
    named = settings.swap.magnitude_only_methods
    present = set(values["method"].astype(str))
    tests = sorted(present - {settings.reference})
    for method in named:
        if method not in tests:
            log.add(
                "study-option",
                "[findings] magnitude_only_methods names a method that is not a test method "
                "of the values table",
                file=settings.source_name,
                column="magnitude_only_methods",
                value=method,
                expected=f"one of {tests}",
            )


def _named(problems: list[Problem], name: str) -> list[Problem]:
    """``problems`` of one input file, with the file named as the outputs name it."""
    return [p if p.file is None else replace(p, file=name) for p in problems]


COMPACT_COLUMNS = frozenset(
    ("subject", "method", "reference", "parameter", "input_parameter", "source_column",
     "source_file", "status", "reason", "group", "segment_name", "ring", "territory")
)  # fmt: skip
"""Text columns of few distinct values (or repeated per segment) that the study's long
tables hold as pandas categoricals: the same text in a tenth of the memory (10 million
input values of a 100,000-subject cohort: 2.5 GB less)."""


def _compact(frame: pd.DataFrame) -> None:
    for column in frame.columns:
        if column in COMPACT_COLUMNS and not isinstance(frame[column].dtype, pd.CategoricalDtype):
            frame[column] = frame[column].astype("category")


def _harmonise(
    values: pd.DataFrame,
    subjects: pd.DataFrame,
    settings: StudySettings,
    log: ProblemLog,
    name: str,
) -> pd.DataFrame:
    """Convert every record to canonical units; set aside implausible values (policy
    ``"exclude"``); resolve T2* given beside R2*."""
    parameter = values["parameter"]
    value = values["input_value"].to_numpy(dtype=float).copy()
    t2 = parameter.eq("t2star").to_numpy()
    with np.errstate(divide="ignore"):  # T2* = 0 is implausible: refused or excluded
        value[t2] = t2star_ms_to_r2star(value[t2])
    if settings.ff_unit == "fraction":
        ff = parameter.eq("ff").to_numpy()
        value[ff] = fraction_to_percent(value[ff])
    if settings.field_unit == "ppm":
        fld = parameter.eq("field").to_numpy()
        b0 = values.loc[fld, "subject"].map(subjects.set_index("subject")["field_strength"])
        value[fld] = ppm_to_hz(value[fld], b0.to_numpy(dtype=float))
        # the plausible range is in Hz: checked once the field strength has converted ppm
        too_far = fld & (np.abs(value) > settings.checks.field_max_abs_hz)
        flag_field(values, too_far, settings, log, name)
    rec = values.rename(columns={ROW: "source_row", "parameter": "input_parameter"})
    rec["source_file"] = name
    rec["parameter"] = rec["input_parameter"].replace({"t2star": "r2star"})
    rec["value"] = value
    report_excluded_implausible(rec, log, name)
    blank = rec["blank"].to_numpy(dtype=bool)
    rec["status"] = _labels(blank, "missing", "used")
    rec["reason"] = _labels(blank, "blank cell", "")
    if IMPLAUSIBLE in rec.columns:
        implausible = rec[IMPLAUSIBLE].ne("").to_numpy()
        rec.loc[implausible, "status"] = "excluded"
        rec.loc[implausible, "reason"] = rec.loc[implausible, IMPLAUSIBLE]
    rec = rec.drop(columns=["blank", IMPLAUSIBLE], errors="ignore")
    _resolve_t2star(rec, settings, log, name)
    return rec


def _resolve_t2star(rec: pd.DataFrame, settings: StudySettings, log: ProblemLog, name: str) -> None:
    """T2* and R2* for the same key: keep R2*, check agreement (every disagreement is an
    error), list the agreeing T2* record as excluded."""
    key = ["subject", "method", "segment"]
    both = rec[rec["parameter"].eq("r2star") & rec["status"].eq("used")]
    if not both["input_parameter"].eq("t2star").any():
        return  # no T2*: nothing can clash
    counts = both.groupby(key)["input_parameter"].transform("nunique")
    clash = both[counts > 1]
    if not len(clash):
        return
    wide = clash.pivot_table(index=key, columns="input_parameter", values="value", aggfunc="first")
    rows = clash.pivot_table(
        index=key, columns="input_parameter", values="source_row", aggfunc="first"
    )
    where = clash.set_index([*key, "input_parameter"])["source_column"]
    tol = settings.checks.t2star_r2star_tolerance
    disagree = ((wide["t2star"] - wide["r2star"]).abs() > tol * wide["r2star"].abs()).to_numpy()
    conflicts = wide.index[disagree]
    expected = f"R2* = 1000 / T2* within {tol:.0%}, or give only one of them"
    for idx in conflicts[:PER_CODE]:
        t2_row, t2_column = int(rows.loc[idx, "t2star"]), str(where.loc[(*idx, "t2star")])
        log.add(
            "t2star-r2star-conflict",
            f"T2* (row {t2_row}, column {t2_column!r}) gives R2* "
            f"{wide.loc[idx, 't2star']:.4g} 1/s but R2* is {wide.loc[idx, 'r2star']:.4g} 1/s "
            f"for segment {idx[2]}",
            file=name,
            row=int(rows.loc[idx, "r2star"]),
            column=str(where.loc[(*idx, "r2star")]),
            expected=expected,
            subject=str(idx[0]),
            method=str(idx[1]),
        )
    if len(conflicts) > PER_CODE:
        log.add(
            "t2star-r2star-conflict",
            f"{len(conflicts) - PER_CODE} more segments where T2* and R2* disagree "
            f"({len(conflicts)} in all)",
            file=name,
            expected=expected,
        )
    drop = (
        rec.set_index(key).index.isin(wide.index[~disagree])
        & rec["input_parameter"].eq("t2star").to_numpy()
        & rec["status"].eq("used").to_numpy()
    )
    rec.loc[drop, "status"] = "excluded"
    rec.loc[drop, "reason"] = "T2* duplicates the R2* value given for the same segment"


def _labels(mask: np.ndarray, yes: str, no: str) -> pd.api.extensions.ExtensionArray:
    """``yes`` where ``mask`` else ``no``, as text (what ``np.where`` gives, built by take)."""
    return pd.array([no, yes], dtype="str").take(mask.astype(np.intp))


def _lookup(keys: pd.Series, mapping: pd.Series | dict) -> pd.Series:
    """``keys.map(mapping)`` for a long column of few distinct keys: each key looked up once."""
    codes, uniques = pd.factorize(keys)
    found = pd.Series(uniques).map(mapping)
    if (codes < 0).any():  # missing keys map to missing
        return keys.map(mapping)
    return pd.Series(found.array.take(codes), index=keys.index, name=keys.name)


def _canonical_values(
    records: pd.DataFrame, subjects: pd.DataFrame, shift: np.ndarray
) -> pd.DataFrame:
    """The used records in canonical units, field values referenced (``value - shift``)."""
    used = records["status"].eq("used").to_numpy()
    canon = records.loc[used, ["subject", "method", "segment", "parameter", "value"]].copy()
    canon["segment"] = canon["segment"].astype(int)
    canon["value"] = canon["value"].to_numpy(dtype=float) - shift[used]
    if not np.isfinite(canon["value"].to_numpy(dtype=float)).all():
        raise RuntimeError("a used value is not finite")  # invariant: checks refuse these
    info = subjects.set_index("subject")
    canon["group"] = _lookup(canon["subject"], info["group"])
    canon["field_strength"] = _lookup(canon["subject"], info["field_strength"]).astype(float)
    canon["segment_name"] = _lookup(canon["segment"], {n: s.name for n, s in SEGMENTS.items()})
    canon["ring"] = _lookup(canon["segment"], {n: s.ring for n, s in SEGMENTS.items()})
    canon["territory"] = _lookup(canon["segment"], {n: s.territory for n, s in SEGMENTS.items()})
    return canon.reset_index(drop=True)


def _pair(canon: pd.DataFrame, reference: str, order: tuple) -> pd.DataFrame:
    """Test-method rows with the reference value of the same (subject, segment, parameter).

    The join and the sort run on integer codes of the keys (text sorts by code point either
    way), which gives the rows of ``merge`` + ``sort_values`` on the text keys in a fraction
    of the time at a million rows.
    """
    is_ref = canon["method"].eq(reference).to_numpy()
    subject, _ = pd.factorize(canon["subject"], sort=True)
    method = pd.Categorical(canon["method"].astype(str), categories=order).codes
    parameter, parameters = pd.factorize(canon["parameter"])
    segment = canon["segment"].to_numpy(dtype=np.int64)
    key = _key_codes(subject, segment, parameter)
    ref_rows, test_rows = np.flatnonzero(is_ref), np.flatnonzero(~is_ref)
    match = pd.Index(key[ref_rows]).get_indexer(key[test_rows])  # one reference row per key
    test_rows, ref_rows = test_rows[match >= 0], ref_rows[match[match >= 0]]
    order = {p: i for i, p in enumerate(PARAMETERS)}
    rank = np.array([order.get(p, len(order)) for p in parameters], dtype=np.int64)[parameter]
    # parameter (in PARAMETERS order), method (study order), subject, segment; keys unique
    sort = np.lexsort((segment[test_rows], subject[test_rows], method[test_rows], rank[test_rows]))
    test_rows, ref_rows = test_rows[sort], ref_rows[sort]
    paired = canon.iloc[test_rows].reset_index(drop=True)
    paired = paired.rename(columns={"value": "test_value"})
    paired["reference_value"] = canon["value"].to_numpy()[ref_rows]
    paired["reference"] = reference
    return paired[list(PAIRED_COLUMNS)]


def _key_codes(subject: np.ndarray, segment: np.ndarray, parameter: np.ndarray) -> np.ndarray:
    """One integer per (subject code, segment, parameter code); segments below 0 (missing)
    give keys of their own."""
    width = int(max(segment.max(initial=0), 0)) + 2
    return (subject.astype(np.int64) * width + (segment + 1)) * (
        int(parameter.max(initial=0)) + 1
    ) + parameter


def _settle(records: pd.DataFrame, settings: StudySettings) -> np.ndarray:
    """Exclude what cannot be compared; return each record's field reference offset.

    A used record stays used only if it is paired (a test value with the reference value of
    the same subject, segment and parameter; a reference value with at least one test
    value) and, for the field, if its (subject, method) has a reference offset. Offsets are
    computed from the paired field values only (subject median, or median of the remote
    segments), so an excluded value shifts nothing. Excluding a value can unpair another or
    remove a remote segment, so the steps repeat until nothing changes (the used set only
    shrinks: at most as many rounds as records, in practice two or three).

    Returns the offset per record (0 outside the field; NaN for records not used).
    """
    reference = settings.reference
    subjects, _ = pd.factorize(records["subject"])
    parameters, _ = pd.factorize(records["parameter"])
    methods, method_labels = pd.factorize(records["method"])
    segment = records["segment"].astype("Int64").fillna(-1).to_numpy(dtype=np.int64)
    key = _key_codes(subjects, segment, parameters)
    is_ref = records["method"].eq(reference).to_numpy()
    is_field = records["parameter"].eq("field").to_numpy()
    status = records["status"].to_numpy(dtype=object)
    used, excluded = status == "used", status == "excluded"
    referencing = settings.field_referencing
    basis_segment = (
        np.isin(segment, settings.remote_segments)
        if referencing == "remote"
        else np.ones(len(records), dtype=bool)
    )
    unit = subjects.astype(np.int64) * (len(method_labels) + 1) + methods  # (subject, method)
    shift = np.zeros(len(records))
    while True:
        partner = np.where(
            is_ref, np.isin(key, key[used & ~is_ref]), np.isin(key, key[used & is_ref])
        )
        unpaired = used & ~partner
        if unpaired.any():
            _exclude(records, unpaired, _unpaired_reasons(key, is_ref, excluded))
            used, excluded = used & ~unpaired, excluded | unpaired
            continue
        if referencing == "none" or not (used & is_field).any():
            break
        basis = used & is_field & basis_segment
        offset = (
            pd.Series(records["value"].to_numpy(dtype=float)[basis]).groupby(unit[basis]).median()
        )
        rows = used & is_field
        shift = np.zeros(len(records))
        shift[rows] = offset.reindex(unit[rows]).to_numpy(dtype=float)
        unreferenced = rows & np.isnan(shift)
        if not unreferenced.any():
            break
        segments = ", ".join(str(s) for s in settings.remote_segments)
        texts = np.array(
            [
                f"field not referenced: subject has no usable remote-segment value "
                f"(segments {segments}) for method {m!r}"
                for m in method_labels
            ],
            dtype=object,
        )
        _exclude(records, unreferenced, texts[methods])
        used, excluded = used & ~unreferenced, excluded | unreferenced
    shift[~used] = np.nan
    return shift


def _unpaired_reasons(key: np.ndarray, is_ref: np.ndarray, excluded: np.ndarray) -> np.ndarray:
    """Why each record would be unpaired: its partner is excluded, or there is none."""
    partner_excluded = np.where(
        is_ref, np.isin(key, key[excluded & ~is_ref]), np.isin(key, key[excluded & is_ref])
    )
    return np.where(
        is_ref,
        np.where(
            partner_excluded,
            "the other methods' values for this segment are excluded",
            "no other method has a value for this segment",
        ),
        np.where(
            partner_excluded,
            "the reference value for this segment is excluded",
            "the reference method has no value for this segment",
        ),
    )


def _exclude(records: pd.DataFrame, mask: np.ndarray, reason: np.ndarray) -> None:
    records.loc[mask, "status"] = "excluded"
    records.loc[mask, "reason"] = reason[mask]
