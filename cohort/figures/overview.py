"""The overview figure: which test method is good enough, at a glance.

One forest figure (:func:`cohort.plots.method_forest.method_forest`): test methods as rows,
panels for each parameter's limits of agreement and CCC (agreement table, stratum ``all``)
and each finding's segment-level sensitivity (finding agreement table, level ``segment``,
stratum ``all``), with the acceptance criteria and verdicts of ``method_verdicts`` when the
study declares criteria. Nothing is estimated here: the intervals drawn are those the
verdicts use (:func:`cohort.analysis.verdicts.cluster_columns`), and a panel's verdict and a
method's overall verdict combine the table's verdicts by
:func:`cohort.analysis.verdicts.overall_verdict`.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Mapping, Sequence

import pandas as pd

from cohort.analysis.verdicts import overall_verdict, preferred_interval
from cohort.domain.units import PARAMETERS
from cohort.domain.wording import interval_label
from cohort.figures.captions import _label, _names_note, _unit
from cohort.figures.records import SkippedFigure, _Drawn, _Item
from cohort.figures.tables import (
    AGREEMENT_TABLE,
    ALL_STRATUM,
    CCC,
    CONFIDENCE_LEVEL,
    _float,
    _table,
    _text,
)
from cohort.io.study import Study
from cohort.plots.method_forest import ForestPanel, method_forest, panel_letter

OVERVIEW_KEY = "overview_methods"
OVERVIEW_SECTION = "overview"
FINDINGS_AGREEMENT_TABLE = "findings_agreement"
VERDICTS_TABLE = "method_verdicts"
SEGMENT_LEVEL = "segment"

OVERVIEW_AGREEMENT_REQUIRED: tuple[str, ...] = (
    "parameter",
    "method",
    "stratum",
    "bias",
    "loa_low",
    "loa_high",
)
"""Columns of the agreement table without which the overview cannot be drawn."""
FINDINGS_AGREEMENT_REQUIRED: tuple[str, ...] = (
    "finding",
    "method",
    "level",
    "stratum",
    "sensitivity",
    "sensitivity_ci_low",
    "sensitivity_ci_high",
)
VERDICTS_REQUIRED: tuple[str, ...] = ("method", "target", "statistic", "criterion", "verdict")

LIMIT_STATISTICS = ("loa_low", "loa_high")

MAX_LIMIT_PANELS = 4
"""Limits panels per tier: each shows two intervals a row, so they need the width."""
MAX_OTHER_PANELS = 5
"""CCC and sensitivity panels per tier at double-column width (about 30 mm each)."""


def _method_label(study: Study, method: str) -> str:
    """The display label of a method (the one place the overview asks for it)."""
    return study.method_label(method)


def _method_order(study: Study, present: Sequence[str]) -> list[str]:
    """Test methods in the study's order, then any other method of the tables by name."""
    order = [m for m in study.test_methods if m in present]
    return order + sorted(set(present) - set(order) - {study.reference})


def _verdict(
    verdicts: pd.DataFrame | None, method: str, target: str, stats: Sequence[str]
) -> str | None:
    """The verdict of one panel row: the statistics' verdicts combined as the method's
    overall verdict is (:func:`cohort.analysis.verdicts.overall_verdict`); None if none."""
    if verdicts is None:
        return None
    rows = verdicts[(verdicts["target"] == target) & verdicts["statistic"].isin(list(stats))]
    return overall_verdict(rows, method) if (rows["method"] == method).any() else None


def _criterion(verdicts: pd.DataFrame | None, target: str, statistic: str) -> float | None:
    """The criterion declared for (target, statistic); None when none, or when the rows
    disagree (then the figure draws none and the table tells)."""
    if verdicts is None:
        return None
    rows = verdicts[(verdicts["target"] == target) & (verdicts["statistic"] == statistic)]
    values = {float(v) for v in pd.to_numeric(rows["criterion"], errors="coerce")}
    values = {v for v in values if math.isfinite(v)}
    return values.pop() if len(values) == 1 else None


def _interval(row: pd.Series, name: str, table: str) -> tuple[float, float, str, bool]:
    """The interval the verdicts use (:func:`cohort.analysis.verdicts.cluster_columns`: the
    subject cluster bootstrap, else the analytic or Wilson interval), how it was obtained,
    and whether it is the preferred (first) one."""
    lo, hi, text, preferred = preferred_interval(row, name, table)
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return math.nan, math.nan, "", True
    return lo, hi, text or "method not stated in the table", preferred


class _Parts:
    """Panels, rows and interval sources of the overview, gathered panel by panel."""

    def __init__(self, verdicts: pd.DataFrame | None) -> None:
        self.verdicts = verdicts
        self.panels: list[ForestPanel] = []
        self.rows: list[dict] = []
        self.sources: list[tuple[str, str, str, bool]] = []  # panel, method, how, preferred

    def add_limits(self, parameter: str, part: pd.DataFrame) -> None:
        low, high = (_criterion(self.verdicts, parameter, s) for s in LIMIT_STATISTICS)
        band = (low, high) if low is not None and high is not None and low < high else None
        key = f"limits:{parameter}"
        self.panels.append(
            ForestPanel(key, "limits", _label(parameter), parameter=parameter, band=band)
        )
        for _, row in part.iterrows():
            method, record = str(row["method"]), {}
            for end in ("low", "high"):
                lo, hi, how, first = _interval(row, f"loa_{end}", "agreement")
                record |= {
                    end: _float(row, f"loa_{end}"),
                    f"{end}_ci_low": lo,
                    f"{end}_ci_high": hi,
                }
                if how and math.isfinite(record[end]):  # an interval drawn
                    self.sources.append((key, method, how, first))
            lo, hi, _, _ = _interval(row, "bias", "agreement")
            verdict = _verdict(self.verdicts, method, parameter, LIMIT_STATISTICS)
            self.rows.append(
                {
                    "method": method,
                    "panel": key,
                    "estimate": _float(row, "bias"),
                    "ci_low": lo,
                    "ci_high": hi,
                    "verdict": verdict,
                    **record,
                }
            )

    def add_point(self, kind: str, target: str, title: str, part: pd.DataFrame) -> None:
        """A CCC panel (``target`` a parameter) or a sensitivity panel (a finding)."""
        # The names cluster_columns gives the two tables' interval columns.
        statistic, table = (CCC, "agreement") if kind == "ccc" else ("sensitivity", "findings")
        key = f"{kind}:{target}"
        criterion = _criterion(self.verdicts, target, statistic)
        self.panels.append(ForestPanel(key, kind, title, criterion=criterion))
        for _, row in part.iterrows():
            method = str(row["method"])
            lo, hi, how, first = _interval(row, statistic, table)
            if how and math.isfinite(_float(row, statistic)):  # an interval drawn
                self.sources.append((key, method, how, first))
            self.rows.append(
                {
                    "method": method,
                    "panel": key,
                    "ci_low": lo,
                    "ci_high": hi,
                    "estimate": _float(row, statistic),
                    "verdict": _verdict(self.verdicts, method, target, (statistic,)),
                }
            )


def _gather(
    agreement: pd.DataFrame, findings: pd.DataFrame | None, verdicts: pd.DataFrame | None
) -> tuple[_Parts, list[int]]:
    """Every panel in order (limits, CCC, sensitivity) and the panels per tier."""
    parts = _Parts(verdicts)
    parameters = [p for p in PARAMETERS if p in set(agreement["parameter"].astype(str))]
    for parameter in parameters:
        parts.add_limits(parameter, agreement[agreement["parameter"] == parameter])
    if CCC in agreement.columns:
        for parameter in parameters:
            part = agreement[agreement["parameter"] == parameter]
            parts.add_point("ccc", parameter, _label(parameter), part)
    for finding in [] if findings is None else pd.unique(findings["finding"].astype(str)):
        part = findings[findings["finding"].astype(str) == finding]
        parts.add_point("sensitivity", finding, finding, part)
    n_other = len(parts.panels) - len(parameters)
    return parts, _tiers(len(parameters), n_other)


def _tiers(n_limits: int, n_other: int) -> list[int]:
    """Limits panels on the first tier(s), CCC and sensitivity below; one tier when few."""
    if n_limits + n_other < MAX_OTHER_PANELS:
        return [n_limits + n_other]
    sizes = []
    for n, most in ((n_limits, MAX_LIMIT_PANELS), (n_other, MAX_OTHER_PANELS)):
        while n > 0:
            sizes.append(min(n, most))
            n -= sizes[-1]
    return sizes


def _overview_figures(study: Study, tables: Mapping[str, pd.DataFrame]) -> Iterator[_Item]:
    """The overview forest figure of all test methods, or why it was not drawn."""
    agreement, reason = _table(tables, AGREEMENT_TABLE, OVERVIEW_AGREEMENT_REQUIRED)
    if agreement is None:
        yield SkippedFigure(OVERVIEW_KEY, reason)
        return
    agreement = agreement[
        (agreement["stratum"].astype(str) == ALL_STRATUM)
        & (agreement["method"].astype(str) != study.reference)
        & agreement["parameter"].astype(str).isin(list(PARAMETERS))
    ]
    if agreement.empty:
        yield SkippedFigure(
            OVERVIEW_KEY, f"the agreement table has no {ALL_STRATUM!r} row of a known parameter"
        )
        return
    agreement = agreement.assign(
        method=agreement["method"].astype(str), parameter=agreement["parameter"].astype(str)
    )
    findings = _segment_rows(tables, study)
    verdicts, _ = _table(tables, VERDICTS_TABLE, VERDICTS_REQUIRED)
    if verdicts is not None:
        verdicts = verdicts.assign(
            **{c: verdicts[c].astype(str) for c in ("method", "target", "statistic")}
        )
    parts, tiers = _gather(agreement, findings, verdicts)
    rows = pd.DataFrame(parts.rows)
    methods = _method_order(study, rows["method"].unique().tolist())
    summary = None
    if verdicts is not None:
        summary = {
            m: overall_verdict(verdicts, m) for m in methods if (verdicts["method"] == m).any()
        }
    labels = {m: _method_label(study, m) for m in methods}
    fig = method_forest(
        rows, panels=parts.panels, methods=methods, labels=labels, summary=summary, tiers=tiers
    )
    caption = _caption(study, parts, agreement, findings, labels)
    title = (
        f"Overview: {len(methods)} test method(s) against {_method_label(study, study.reference)}"
    )
    yield _Drawn(OVERVIEW_KEY, title, caption, OVERVIEW_SECTION, None, None, fig)


def _segment_rows(tables: Mapping[str, pd.DataFrame], study: Study) -> pd.DataFrame | None:
    table, _ = _table(tables, FINDINGS_AGREEMENT_TABLE, FINDINGS_AGREEMENT_REQUIRED)
    if table is None:
        return None
    rows = table[
        (table["level"].astype(str) == SEGMENT_LEVEL)
        & (table["stratum"].astype(str) == ALL_STRATUM)
        & (table["method"].astype(str) != study.reference)
    ]
    return rows.assign(method=rows["method"].astype(str)) if not rows.empty else None


def _letters(panels: Sequence[ForestPanel], kind: str) -> str:
    """``"a-c"``, ``"d"`` or ``"d, e"``: the letters of the panels of ``kind``."""
    index = [k for k, p in enumerate(panels) if p.kind == kind]
    if len(index) > 2 and index == list(range(index[0], index[-1] + 1)):
        return f"{panel_letter(index[0])}\N{EN DASH}{panel_letter(index[-1])}"
    return ", ".join(panel_letter(k) for k in index)


def _sources_text(parts: _Parts, kinds: Sequence[str], labels: Mapping[str, str]) -> str:
    """How the drawn intervals of panels of ``kinds`` were obtained: the preferred way, and
    any fallback with the method and panel it was used for."""
    letter = {p.key: panel_letter(k) for k, p in enumerate(parts.panels)}
    kind = {p.key: p.kind for p in parts.panels}
    used = [s for s in parts.sources if kind[s[0]] in kinds]
    hows = list(dict.fromkeys(how for _, _, how, _ in used))
    if len(hows) <= 1:
        return _wilson_text(hows[0]) if hows else "none available"
    texts = [_wilson_text(h) for h in dict.fromkeys(h for _, _, h, first in used if first)]
    for how in dict.fromkeys(h for _, _, h, first in used if not first):
        by_method: dict[str, list[str]] = {}
        for key, method, _, _ in (s for s in used if s[2] == how):
            by_method.setdefault(labels.get(method, method), []).append(letter[key])
        where = ", ".join(f"'{m}' ({', '.join(k)})" for m, k in by_method.items())
        texts.append(f"where that was not available, for {where}: {_wilson_text(how)}")
    return "; ".join(texts)


def _wilson_text(text: str) -> str:
    """A ``ci_method`` without the part about kappa that the findings table adds."""
    parts, depth, start = [], 0, 0
    for k, char in enumerate(text):  # split at "; " outside parentheses only
        depth += {"(": 1, ")": -1}.get(char, 0)
        if depth == 0 and text.startswith("; ", k):
            parts.append(text[start:k])
            start = k + 2
    parts.append(text[start:])
    kept = [p for p in parts if not p.startswith("kappa")]
    return "; ".join(kept) if kept else text


def _findings_text(findings: pd.DataFrame) -> str:
    """``"hemorrhage on R2*, fat on fat fraction"``: each finding with its parameter."""
    parts = []
    for finding in pd.unique(findings["finding"].astype(str)):
        first = findings[findings["finding"].astype(str) == finding].iloc[0]
        parameter = _text(first, "parameter")
        parts.append(f"{finding} on {_label(parameter)}" if parameter in PARAMETERS else finding)
    return ", ".join(parts)


def _level(frame: pd.DataFrame) -> str:
    levels = pd.to_numeric(frame.get(CONFIDENCE_LEVEL, pd.Series(dtype=float)), errors="coerce")
    levels = [v for v in pd.unique(levels) if math.isfinite(v)]
    return interval_label(levels[0] if len(levels) == 1 else None)


# Long: one caption of several parts in the order of the panels, read on its own.
def _caption(
    study: Study,
    parts: _Parts,
    agreement: pd.DataFrame,
    findings: pd.DataFrame | None,
    labels: Mapping[str, str],
) -> str:
    panels, ci = parts.panels, _level(agreement)
    units = ", ".join(
        f"{_label(p.parameter)} in {_unit(p.parameter)}" for p in panels if p.kind == "limits"
    )
    text = (
        "Agreement of each test method with the reference method, "
        f"{_method_label(study, study.reference)}, one row per test method. "
        f"Panels {_letters(panels, 'limits')}: limits of agreement of the difference test "
        f"minus reference over all (subject, segment) pairs ({units}); the short ticks "
        "joined by a thin line are the lower and upper limit, the thick bars their "
        f"{ci}s ({_sources_text(parts, ('limits',), labels)}), the marker the bias; dotted "
        "line: no difference."
    )
    if any(p.kind == "ccc" for p in panels):
        text += (
            f" Panels {_letters(panels, 'ccc')}: Lin's concordance correlation coefficient "
            f"(Lin 1989) with its {ci} ({_sources_text(parts, ('ccc',), labels)})."
        )
    if findings is not None:
        text += (
            f" Panels {_letters(panels, 'sensitivity')}: sensitivity of each test method "
            f"for a finding ({_findings_text(findings)}), segment by segment, against the "
            f"reference's classification, with its {_level(findings)} "
            f"({_sources_text(parts, ('sensitivity',), labels)})."
        )
        if any(kind == "sensitivity" and not first for kind, first in _kinds(parts)):
            text += (
                " The Wilson score interval ignores that segments are clustered in subjects "
                "and is too narrow when a subject's segments are alike."
            )
    text += " A marker without a bar has no interval in the table."
    rows = pd.DataFrame(parts.rows)
    if ((rows["ci_low"] == rows["ci_high"]) & rows["ci_low"].notna()).any():
        text += (
            " An interval of zero width (a percentile bootstrap of a proportion of 0 or 1) "
            "shows no bar either; it understates the uncertainty."
        )
    text += _verdict_text(parts)
    text += _missing_text(rows, panels, labels)
    text += _names_note(list(labels.values()), "Methods in full")
    return text


def _kinds(parts: _Parts) -> list[tuple[str, bool]]:
    kind = {p.key: p.kind for p in parts.panels}
    return [(kind[key], first) for key, _, _, first in parts.sources]


def _missing_text(rows: pd.DataFrame, panels: Sequence[ForestPanel], labels: Mapping) -> str:
    unknown = rows["estimate"].isna()
    for end in ("low", "high"):
        if end in rows.columns:
            unknown |= rows["panel"].str.startswith("limits:") & rows[end].isna()
    absent = len(rows) < len(panels) * len(labels)
    if not (unknown.any() or absent):
        return ""
    return (
        " 'not estimable': the table holds no value (its note column says why); "
        "'no result': the table has no row for that method."
    )


def _verdict_text(parts: _Parts) -> str:
    verdicts = parts.verdicts
    if verdicts is None:
        return (
            " No acceptance criteria were declared in the study file, so no verdict is "
            "shown; the intervals alone describe agreement."
        )
    text = (
        " Shaded: the acceptable region under the criteria declared in advance in the study "
        "file (between the dashed lines for the limits of agreement; from the dashed line "
        "up for CCC and sensitivity). Marker shape and colour give each panel's verdict "
        "(filled circle: meets; cross: fails; open diamond: inconclusive; open square: not "
        "assessed); for the limits both limits must meet their criterion. The word at the "
        "right is the method's overall verdict over all its declared criteria: fails if "
        "any fails, else inconclusive if any is, else meets."
    )
    rules = [r for r in pd.unique(verdicts.get("rule", pd.Series(dtype=str)).dropna()) if r]
    if len(rules) == 1:
        text += f" Rule: {rules[0]}"
        text += "" if str(rules[0]).endswith(".") else "."
    elif rules:
        text += f" The rule of each verdict is in the table {VERDICTS_TABLE} (column rule)."
    missing = [
        panel_letter(k)
        for k, p in enumerate(parts.panels)
        if p.band is None and p.criterion is None
    ]
    if missing:
        text += f" No criterion was declared for panel(s) {', '.join(missing)}."
    return text
