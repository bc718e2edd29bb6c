"""The top of the report: which test method is good enough, and which hides the lesions.

An overview table with one row per test method (in the study's order, by display label):
per parameter its limits of agreement with their interval, per finding its segment-level
sensitivity with counts and interval, each with its verdict as a word where a criterion was
declared (never colour alone); then the key results, at most :data:`MAX_KEY_LINES` lines
whatever the number of methods. Numbers come from the run's tables only.
"""

from __future__ import annotations

import math

import pandas as pd

from cohort.analysis.pipeline import Analysis
from cohort.analysis.verdicts import overall_verdict, preferred_interval, segment_overall
from cohort.domain.acceptance import NOT_ASSESSED
from cohort.domain.units import PARAMETERS
from cohort.domain.wording import interval_label
from cohort.report.html import esc, fmt

MAX_KEY_LINES = 10
"""Most lines the key results show (the overview table holds the rest)."""


def _bounds(row: pd.Series, name: str, kind: str) -> tuple[float, float]:
    low, high, _, _ = preferred_interval(row, name, kind)
    return low, high


def _verdict_of(verdicts: pd.DataFrame | None, method: str, target: str, stats: tuple) -> str:
    """The worst verdict of ``stats`` of one method and target (``""`` without criteria)."""
    if verdicts is None:
        return ""
    rows = verdicts[
        verdicts["method"].astype(str).eq(method)
        & verdicts["target"].astype(str).eq(target)
        & verdicts["statistic"].isin(stats)
    ]
    word = overall_verdict(rows, method)
    return "" if word == NOT_ASSESSED else word


def _limits_cell(row: pd.Series) -> str:
    lo_lo, _ = _bounds(row, "loa_low", "agreement")
    _, hi_hi = _bounds(row, "loa_high", "agreement")
    limits = f"{fmt(row['loa_low'], 2)} to {fmt(row['loa_high'], 2)}"
    return f"{limits} ({fmt(lo_lo, 2)} to {fmt(hi_hi, 2)})"


def _sensitivity_cell(row: pd.Series) -> str:
    low, high = _bounds(row, "sensitivity", "findings")
    tp, fn = int(row["tp"]), int(row["fn"])
    if not math.isfinite(float(row["sensitivity"])):
        return f"not estimable ({tp}/{tp + fn})"
    return (
        f"{tp}/{tp + fn} = {100 * row['sensitivity']:.0f} % ({100 * low:.0f} to {100 * high:.0f})"
    )


def overview_table(analysis: Analysis) -> pd.DataFrame:
    """The overview as a display table: one row per test method, a column per parameter
    (limits of agreement) and per finding (segment-level sensitivity), verdict words beside.

    Examples
    --------
    >>> import tempfile
    >>> from cohort.demo import write_demo
    >>> from cohort.io.study import load_study
    >>> from cohort.analysis.pipeline import analyse, options_from_study
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     study = load_study(write_demo(folder, n_subjects=9))
    >>> analysis = analyse(study, options_from_study(study, n_boot=0, figures=False))
    >>> overview_table(analysis).columns[0]
    'method'
    """
    study = analysis.study
    agreement = analysis.tables["agreement"]
    overall = agreement[agreement["stratum"].astype(str).eq("all")]
    detection = analysis.tables["findings_agreement"]
    segment = segment_overall(detection)
    verdicts = analysis.tables.get("method_verdicts")
    rows = []
    for method in study.test_methods:
        out: dict[str, str] = {"method": study.method_label(method)}
        if verdicts is not None:
            out["overall"] = overall_verdict(verdicts, method)
        for p in study.parameters:
            found = overall[overall["method"].astype(str).eq(method) & overall["parameter"].eq(p)]
            head = f"{PARAMETERS[p].label}: limits of agreement ({PARAMETERS[p].unit})"
            cell = _limits_cell(found.iloc[0]) if len(found) else "no pairs"
            word = _verdict_of(verdicts, method, p, ("loa_low", "loa_high"))
            out[head] = f"{cell}: {word}" if word else cell
            if p in study.settings.acceptance.ccc and len(found):
                row = found.iloc[0]
                low, high = _bounds(row, "ccc", "agreement")
                ccc = f"{fmt(row['ccc'], 2)} ({fmt(low, 2)} to {fmt(high, 2)})"
                word = _verdict_of(verdicts, method, p, ("ccc",))
                out[f"{PARAMETERS[p].label}: CCC"] = f"{ccc}: {word}" if word else ccc
        for _, row in segment[segment["method"].astype(str).eq(method)].iterrows():
            head = f"{row['finding']}: segments shown / reference-positive (%)"
            cell = _sensitivity_cell(row)
            word = _verdict_of(verdicts, method, str(row["finding"]), ("sensitivity",))
            out[head] = f"{cell}: {word}" if word else cell
        rows.append(out)
    return pd.DataFrame(rows)


def _line(analysis: Analysis, method: str) -> str:
    """One key-results line of a method: its overall verdict and what fails or is open."""
    study = analysis.study
    verdicts = analysis.tables.get("method_verdicts")
    label = study.method_label(method)
    if verdicts is None:
        detection = analysis.tables["findings_agreement"]
        rows = segment_overall(detection, method)
        shown = "; ".join(
            f"{r.finding}: {int(r.tp)} of {int(r.tp + r.fn)} reference-positive segments shown"
            for r in rows.itertuples()
        )
        return f"{label}: no acceptance criteria declared; {shown}."
    mine = verdicts[verdicts["method"].astype(str).eq(method)]
    word = overall_verdict(verdicts, method)
    parts = []
    for verdict in ("fails", "inconclusive"):
        rows = mine[mine["verdict"].eq(verdict)]
        what = list(dict.fromkeys(_criterion_name(r) for r in rows.itertuples()))
        if what:
            parts.append(f"{verdict}: {', '.join(what)}")
    assessed = mine[mine["verdict"] != NOT_ASSESSED]
    # one criterion per target and kind: both limits of agreement are one criterion
    n = len({(r.target, "loa" if r.statistic.startswith("loa") else r.statistic)
             for r in assessed.itertuples()})  # fmt: skip
    detail = f" ({'; '.join(parts)})" if parts else ""
    return f"{label}: {word} ({n} criteria assessed){detail}."


def _criterion_name(row: object) -> str:
    """A criterion in a few words: 'R2* limits', 'hemorrhage sensitivity 10 %'."""
    target, statistic = str(row.target), str(row.statistic)
    if statistic.startswith("loa"):
        return f"{PARAMETERS[target].label} limits" if target in PARAMETERS else f"{target} limits"
    if statistic == "ccc":
        return f"{PARAMETERS[target].label} CCC {fmt(row.estimate, 2)}"
    return f"{target} sensitivity {100 * float(row.estimate):.0f} %"


def key_results(analysis: Analysis) -> list[str]:
    """At most :data:`MAX_KEY_LINES` lines: one per test method (study order), then the
    number of alerts."""
    lines = [_line(analysis, m) for m in analysis.study.test_methods]
    if len(lines) > MAX_KEY_LINES - 1:
        hidden = len(lines) - (MAX_KEY_LINES - 2)
        lines = [*lines[: MAX_KEY_LINES - 2], f"{hidden} more methods: see the overview table."]
    n = len(analysis.alerts)
    lines.append(
        f"{n} alert{'s' if n != 1 else ''} raised (listed above and in manifest.json)."
        if n
        else "No alert was raised with the settings in force."
    )
    return lines


def interval_note(analysis: Analysis) -> str:
    """How the overview's intervals were obtained, in one sentence."""
    o = analysis.options
    label = interval_label(o.confidence_level)
    how = (
        f"subject cluster bootstrap percentile intervals (B = {o.n_boot})"
        if o.n_boot
        else "analytic (limits) and Wilson score (sensitivity) intervals: no bootstrap ran, "
        "so segments of a subject were treated as independent"
    )
    return esc(
        f"In brackets: {label}s, {how}; for limits of agreement, the outer bounds (lower bound "
        "of the lower limit to upper bound of the upper limit) that the verdicts use."
    )


def differences_view(analysis: Analysis) -> pd.DataFrame | None:
    """The head-to-head table as the report shows it: methods by label, the difference with
    its interval, the adjusted p-value (None with fewer than two test methods)."""
    table = analysis.tables.get("method_differences")
    if table is None or table.empty:
        return None
    label = analysis.study.method_label
    rows = []
    for r in table.itertuples(index=False):
        rows.append(
            {
                "comparison": f"{label(r.method_a)} minus {label(r.method_b)}",
                "target": r.target,
                "statistic": str(r.statistic).replace("_", " "),
                "estimates": f"{fmt(r.estimate_a)} vs {fmt(r.estimate_b)}",
                "difference": f"{fmt(r.difference)} ({fmt(r.ci_low)} to {fmt(r.ci_high)})",
                "better": r.better,
                "p adjusted": fmt(r.p_adjusted),
                "note": r.note if r.note == r.note else "",
            }
        )
    return pd.DataFrame(rows)
