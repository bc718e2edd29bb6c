"""A loaded study: checked, harmonised, paired tables ready for analysis.

``load_study`` reads both tables, checks them (collecting every problem), converts values to
the canonical units of :mod:`cohort.units`, references field maps within each subject, pairs
each test method with the reference, and accounts for every input record: each is *used*,
*missing* (blank cell) or *excluded* with a reason, and the counts reconcile.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .loading import ROW, read_table
from .problems import Problem, ProblemLog, StudyError
from .segments import SEGMENTS, segment_model
from .settings import StudySettings, read_study_file
from .units import PARAMETERS, fraction_to_percent, ppm_to_hz, t2star_ms_to_r2star
from .validation import check_across, check_subjects, check_values

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
    settings : the resolved :class:`~cohort.settings.StudySettings`.
    subjects : one row per subject (``subject, group, field_strength`` and covariates).
    values : canonical values, one row per (subject, method, segment, parameter) with a
        finite value: ff in %, r2star in 1/s, field in Hz referenced within subject.
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

    @property
    def reference(self) -> str:
        return self.settings.reference

    @property
    def methods(self) -> tuple[str, ...]:
        """All methods, the reference first."""
        others = sorted(set(self.values["method"].unique()) - {self.reference})
        return (self.reference, *others)

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
        reasons = self.exclusions().query("status == 'excluded'")["reason"].value_counts()
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

    Raises :class:`~cohort.problems.StudyError` listing every problem found.
    """
    settings = source if isinstance(source, StudySettings) else read_study_file(source)
    log = ProblemLog()
    raws = {}
    for key, path in (("values", settings.values), ("subjects", settings.subjects)):
        try:
            raws[key] = read_table(path)
            log.problems.extend(raws[key].warnings)
        except StudyError as exc:
            log.problems.extend(exc.problems)
    if "values" not in raws or "subjects" not in raws:
        log.raise_if_errors()
    values_raw, subjects_raw = raws["values"], raws["subjects"]
    values = check_values(values_raw, settings, log)
    subjects = check_subjects(subjects_raw, settings, log)
    if values is not None and subjects is not None:
        check_across(values, subjects, settings, log, values_raw.name, subjects_raw.name)
    log.raise_if_errors()
    assert values is not None and subjects is not None  # guaranteed by raise_if_errors
    subjects = subjects.drop(columns=[ROW]).reset_index(drop=True)
    records = _harmonise(values, subjects, settings, log, values_raw.name)
    log.raise_if_errors()
    canonical = _canonical_values(records, subjects, settings)
    paired = _pair(canonical, settings.reference)
    _mark_unpaired(records, canonical, paired, settings.reference)
    for frame in (records, canonical, paired):
        _compact(frame)
    return Study(settings, subjects, canonical, paired, records, log.warnings)


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
    """Convert every record to canonical units; resolve T2* given beside R2*."""
    rec = values.rename(columns={ROW: "source_row", "parameter": "input_parameter"})
    rec["source_file"] = name
    rec["parameter"] = rec["input_parameter"].replace({"t2star": "r2star"})
    value = rec["input_value"].to_numpy(dtype=float).copy()
    t2 = rec["input_parameter"].eq("t2star").to_numpy()
    value[t2] = t2star_ms_to_r2star(value[t2])
    if settings.ff_unit == "fraction":
        ff = rec["input_parameter"].eq("ff").to_numpy()
        value[ff] = fraction_to_percent(value[ff])
    if settings.field_unit == "ppm":
        fld = rec["input_parameter"].eq("field").to_numpy()
        b0 = rec.loc[fld, "subject"].map(subjects.set_index("subject")["field_strength"])
        value[fld] = ppm_to_hz(value[fld], b0.to_numpy(dtype=float))
    rec["value"] = value
    blank = rec["blank"].to_numpy(dtype=bool)
    rec["status"] = _labels(blank, "missing", "used")
    rec["reason"] = _labels(blank, "blank cell", "")
    rec = rec.drop(columns=["blank"])

    # T2* and R2* for the same key: keep R2*, check agreement, list the T2* record as excluded
    key = ["subject", "method", "segment"]
    both = rec[rec["parameter"].eq("r2star") & rec["value"].notna()]
    if not both["input_parameter"].eq("t2star").any():
        return rec  # no T2*: nothing can clash
    counts = both.groupby(key)["input_parameter"].transform("nunique")
    clash = both[counts > 1]
    if len(clash):
        wide = clash.pivot_table(
            index=key, columns="input_parameter", values="value", aggfunc="first"
        )
        rows = clash.pivot_table(
            index=key, columns="input_parameter", values="source_row", aggfunc="first"
        )
        tol = settings.checks.t2star_r2star_tolerance
        disagree = (wide["t2star"] - wide["r2star"]).abs() > tol * wide["r2star"].abs()
        for idx in wide.index[disagree.to_numpy()][:20]:
            log.add(
                "t2star-r2star-conflict",
                f"T2* (row {int(rows.loc[idx, 't2star'])}) gives R2* "
                f"{wide.loc[idx, 't2star']:.4g} 1/s "
                f"but R2* is {wide.loc[idx, 'r2star']:.4g} 1/s for subject {idx[0]!r}, "
                f"method {idx[1]!r}, segment {idx[2]}",
                file=name,
                row=int(rows.loc[idx, "r2star"]),
                expected=f"R2* = 1000 / T2* within {tol:.0%}, or give only one of them",
            )
        agree_keys = wide.index[~disagree.to_numpy()]
        drop = (
            rec.set_index(key).index.isin(agree_keys)
            & rec["input_parameter"].eq("t2star").to_numpy()
        )
        rec.loc[drop, "status"] = "excluded"
        rec.loc[drop, "reason"] = "T2* duplicates the R2* value given for the same segment"
    return rec


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
    records: pd.DataFrame, subjects: pd.DataFrame, settings: StudySettings
) -> pd.DataFrame:
    used = records[records["status"].eq("used")]
    canon = used[["subject", "method", "segment", "parameter", "value"]].copy()
    canon["segment"] = canon["segment"].astype(int)
    fld = canon["parameter"].eq("field")
    if fld.any() and settings.field_referencing != "none":
        part = canon[fld]
        if settings.field_referencing == "subject-median":
            basis = part
        else:
            basis = part[part["segment"].isin(settings.remote_segments)]
        offset = basis.groupby(["subject", "method"])["value"].median()
        # each row's (subject, method) offset, NaN where there is none (as Index.map gives)
        keys = part.groupby(["subject", "method"], sort=True)
        shift = offset.reindex(keys.size().index).to_numpy(dtype=float)[keys.ngroup()]
        canon.loc[fld, "value"] = part["value"].to_numpy() - shift
    info = subjects.set_index("subject")
    canon["group"] = _lookup(canon["subject"], info["group"])
    canon["field_strength"] = _lookup(canon["subject"], info["field_strength"]).astype(float)
    canon["segment_name"] = _lookup(canon["segment"], {n: s.name for n, s in SEGMENTS.items()})
    canon["ring"] = _lookup(canon["segment"], {n: s.ring for n, s in SEGMENTS.items()})
    canon["territory"] = _lookup(canon["segment"], {n: s.territory for n, s in SEGMENTS.items()})
    canon = canon[np.isfinite(canon["value"].to_numpy(dtype=float))]
    return canon.reset_index(drop=True)


def _pair(canon: pd.DataFrame, reference: str) -> pd.DataFrame:
    """Test-method rows with the reference value of the same (subject, segment, parameter).

    The join and the sort run on integer codes of the keys (text sorts by code point either
    way), which gives the rows of ``merge`` + ``sort_values`` on the text keys in a fraction
    of the time at a million rows.
    """
    is_ref = canon["method"].eq(reference).to_numpy()
    subject, _ = pd.factorize(canon["subject"], sort=True)
    method, _ = pd.factorize(canon["method"], sort=True)
    parameter, parameters = pd.factorize(canon["parameter"])
    segment = canon["segment"].to_numpy(dtype=np.int64)
    key = _key_codes(subject, segment, parameter)
    ref_rows, test_rows = np.flatnonzero(is_ref), np.flatnonzero(~is_ref)
    match = pd.Index(key[ref_rows]).get_indexer(key[test_rows])  # one reference row per key
    test_rows, ref_rows = test_rows[match >= 0], ref_rows[match[match >= 0]]
    order = {p: i for i, p in enumerate(PARAMETERS)}
    rank = np.array([order.get(p, len(order)) for p in parameters], dtype=np.int64)[parameter]
    # parameter (in PARAMETERS order), method, subject, segment; every key is unique
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


def _mark_unpaired(
    records: pd.DataFrame, canon: pd.DataFrame, paired: pd.DataFrame, reference: str
) -> None:
    """Mark used records that did not enter any pair as excluded, with the reason."""
    used = records["status"].eq("used").to_numpy()
    # integer codes of (subject, segment, parameter[, method]) shared by both tables
    subjects, subject_labels = pd.factorize(records["subject"])
    parameters, parameter_labels = pd.factorize(records["parameter"])
    methods, method_labels = pd.factorize(records["method"])
    segment = records["segment"].astype("Int64").fillna(-1).to_numpy(dtype=np.int64)
    rec_key = _key_codes(subjects, segment, parameters)
    pair_key = _key_codes(
        pd.Index(subject_labels).get_indexer(paired["subject"]),
        paired["segment"].to_numpy(dtype=np.int64),
        pd.Index(parameter_labels).get_indexer(paired["parameter"]),
    )
    in_pair = np.isin(rec_key, pair_key)
    n_methods = len(method_labels) + 1
    rec_key_m = rec_key * n_methods + methods
    pair_key_m = pair_key * n_methods + pd.Index(method_labels).get_indexer(paired["method"])
    is_ref = records["method"].eq(reference).to_numpy()
    ok = np.where(is_ref, in_pair, np.isin(rec_key_m, pair_key_m))
    unpaired = used & ~ok
    records.loc[unpaired & is_ref, "reason"] = "no other method has a value for this segment"
    records.loc[unpaired & ~is_ref, "reason"] = "the reference method has no value for this segment"
    records.loc[unpaired, "status"] = "excluded"
