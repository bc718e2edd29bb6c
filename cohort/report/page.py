"""The self-contained HTML report of a run (``report.html``).

The report only presents what :func:`cohort.analysis.pipeline.analyse` computed: tables are the same
tidy tables written to ``tables/``, figures are the PNGs in ``figures/``. User-supplied text
is escaped (:func:`cohort.report.html.esc`).
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from typing import Any

import pandas as pd

from cohort import __version__
from cohort.analysis.pipeline import Analysis
from cohort.domain.cautions import CAUTION_LONG
from cohort.domain.units import PARAMETERS
from cohort.domain.wording import interval_label
from cohort.report.html import bullet_list, esc, figure, fmt, page, section, table
from cohort.report.overview import differences_view, interval_note, key_results, overview_table


def with_ci(
    frame: pd.DataFrame,
    column: str,
    digits: int = 3,
    suffix: str = "_ci",
    bounds: tuple[str, str] | None = None,
) -> pd.Series:
    """``"estimate (low to high)"`` text for a column and its ``<column>_ci_low/_high``
    (or the two columns named in ``bounds``)."""
    low_name, high_name = bounds or (f"{column}{suffix}_low", f"{column}{suffix}_high")
    low, high = frame.get(low_name), frame.get(high_name)
    if low is None or high is None:
        return frame[column].map(lambda v: fmt(v, digits))
    return pd.Series(
        [
            f"{fmt(v, digits)} ({fmt(lo, digits)} to {fmt(hi, digits)})"
            for v, lo, hi in zip(frame[column], low, high, strict=True)
        ],
        index=frame.index,
    )


def markdown_to_html(text: str) -> str:
    """The small Markdown subset the methods text uses: headings, paragraphs, bullets, bold."""
    html_lines: list[str] = []
    in_list = False
    for line in text.splitlines():
        stripped = line.strip()
        item = stripped.startswith("- ")
        if in_list and not item:
            html_lines.append("</ul>")
            in_list = False
        if not stripped:
            continue
        body = esc(stripped[2:] if item else stripped.lstrip("# "))
        body = re.sub(r"\*\*(.+?)\*\*", r"<strong>\1</strong>", body)
        if stripped.startswith("# "):
            continue  # the report has its own section title
        if stripped.startswith("## "):
            html_lines.append(f"<h3>{body}</h3>")
        elif item:
            if not in_list:
                html_lines.append("<ul>")
                in_list = True
            html_lines.append(f"<li>{body}</li>")
        else:
            html_lines.append(f"<p>{body}</p>")
    if in_list:
        html_lines.append("</ul>")
    return "\n".join(html_lines)


def _figures(records: Sequence[Any], section_name: str, parameter: str | None = None) -> str:
    parts = []
    for record in records:
        if record.section != section_name:
            continue
        if parameter is not None and record.parameter != parameter:
            continue
        png = next((p for p in record.paths if str(p).endswith(".png")), None)
        if png is not None:
            parts.append(figure(png, f"{record.title}. {record.caption}"))
    return "\n".join(parts)


def _head_to_head(analysis: Analysis) -> list[tuple[str, str, str]]:
    """The section comparing test methods with each other (two or more test methods)."""
    view = differences_view(analysis)
    if view is None:
        return []
    level = interval_label(analysis.options.confidence_level)
    body = (
        f"<p>Differences between test methods against the same reference (first minus "
        f"second; {level}s from the subject cluster bootstrap with the same resampled "
        "subjects for both methods; p-values adjusted over the whole table, see Methods). "
        "<code>better</code> says which direction favours the first method's agreement: "
        "lower absolute bias and narrower limits, higher CCC, sensitivity and specificity."
        "</p>" + table(view, caption="Test methods head to head")
    )
    return [("head-to-head", "Test methods head to head", body)]


def _labelled(study: Any, frame: pd.DataFrame) -> pd.DataFrame:
    """``frame`` with methods and groups shown by their display labels (the CSV tables keep
    the names of the input, for joining)."""
    frame = frame.copy()
    for column, label in (("method", study.method_label), ("reference", study.method_label),
                          ("group", study.group_label)):  # fmt: skip
        if column in frame.columns:
            frame[column] = frame[column].map(lambda v, f=label: v if v != v else f(v))
    return frame


def _table(analysis: Analysis, frame: pd.DataFrame, **options: Any) -> str:
    return table(_labelled(analysis.study, frame), **options)


def _overview(analysis: Analysis, figures: Sequence[Any]) -> str:
    """Alerts first, then the overview table and figure, then the key results."""
    parts = [
        f'<div class="alert"><strong>Alert.</strong> {esc(a)}</div>' for a in analysis.alerts
    ] or [
        '<div class="ok">No deceptive-agreement, missed-lesion, over-calling or fat-water '
        "swap alert was raised with the settings in force.</div>"
    ]
    parts.append(
        table(
            overview_table(analysis),
            caption="Each test method against the reference (verdicts against the criteria "
            "set in advance, where declared)",
            css_class="data overview",
        )
    )
    parts.append(f'<p class="note">{interval_note(analysis)}</p>')
    parts.append(_figures(figures, "overview"))
    parts.append("<h3>Key results</h3>" + bullet_list(key_results(analysis)))
    return "\n".join(p for p in parts if p)


def _study_section(analysis: Analysis) -> str:
    study = analysis.study
    acc = study.accounting()
    parts = [
        f"<p>Reference method <strong>{esc(study.reference)}</strong>; compared: "
        f"{esc(', '.join(study.test_methods))}. Segment model "
        f"{esc(study.settings.segment_model)}; parameters {esc(', '.join(study.parameters))}.</p>",
        table(
            analysis.tables["subjects_per_group"],
            columns={
                "group": "group",
                "field_strength": "field strength (T)",
                "n_subjects": "subjects",
            },
            caption="Subjects per group and field strength",
        ),
        f"<p>Input values: {acc['records_in']} = {acc['used']} used + {acc['missing']} missing "
        f"(blank) + {acc['excluded']} excluded (reasons under Data quality).</p>",
    ]
    return "\n".join(parts)


AGREEMENT_VIEW = {
    "stratum": "stratum",
    "n_subjects": "subjects",
    "n_pairs": "pairs",
    "bias_ci": "bias (95% CI)",
    "loa_low_ci": "lower LoA (95% CI)",
    "loa_high_ci": "upper LoA (95% CI)",
    "ccc_ci": "CCC (95% CI)",
    "icc_ci": "ICC(A,1) (95% CI)",
    "rm_corr": "r_rm",
    "prop_slope_ci": "proportional bias slope (95% CI)",
    "pb_slope": "Passing-Bablok slope",
    "note": "note",
}


def _agreement_section(analysis: Analysis, figures: Sequence[Any]) -> str:
    agreement = analysis.tables["agreement"].copy()
    for column in ("bias", "loa_low", "loa_high", "ccc", "icc", "prop_slope"):
        agreement[f"{column}_ci"] = with_ci(agreement, column)
    parts = [
        "<p>Differences are test minus reference. Limits of agreement (LoA) follow Bland &amp; "
        "Altman (2007) for several segments per subject; all rows, with analytic intervals "
        "beside the bootstrap ones, are in <code>tables/agreement.csv</code>.</p>"
    ]
    for parameter in analysis.study.parameters:
        rows = agreement[agreement["parameter"].eq(parameter)]
        p = PARAMETERS[parameter]
        parts.append(f"<h3>{esc(p.label[0].upper() + p.label[1:])} ({esc(p.unit)})</h3>")
        for method, part in rows.groupby("method", sort=False):
            parts.append(
                _table(
                    analysis,
                    part,
                    columns=AGREEMENT_VIEW,
                    caption=f"{p.label}: {analysis.study.method_label(method)} vs "
                    f"{analysis.study.method_label(analysis.study.reference)}",
                )
            )
            if parameter in analysis.options.ratio_parameters:
                ratio = part.copy()
                for column in ("ratio_bias", "ratio_loa_low", "ratio_loa_high"):
                    ratio[f"{column}_ci"] = with_ci(ratio, column)
                parts.append(
                    _table(
                        analysis,
                        ratio,
                        columns={
                            "stratum": "stratum",
                            "ratio_bias_ci": "mean ratio test/reference (95% CI)",
                            "ratio_loa_low_ci": "lower ratio LoA (95% CI)",
                            "ratio_loa_high_ci": "upper ratio LoA (95% CI)",
                        },
                        caption=f"{p.label}: ratio scale (log-transformed differences)",
                    )
                )
        parts.append(_figures(figures, "agreement", parameter))
    return "\n".join(parts)


FINDINGS_VIEW = {
    "finding": "finding",
    "method": "method",
    "level": "level",
    "stratum": "stratum",
    "tp": "TP",
    "fn": "FN",
    "fp": "FP",
    "tn": "TN",
    "sensitivity_ci": "sensitivity (Wilson 95% CI)",
    "sensitivity_cluster": "sensitivity, cluster bootstrap CI",
    "specificity_ci": "specificity (95% CI)",
    "kappa_ci": "kappa (95% CI)",
    "mcnemar_p": "McNemar p (exact)",
}


def _findings_section(analysis: Analysis, figures: Sequence[Any]) -> str:
    detection = analysis.tables["findings_agreement"].copy()
    for column in ("sensitivity", "specificity", "kappa"):
        detection[f"{column}_ci"] = with_ci(detection, column)
    detection["sensitivity_cluster"] = with_ci(detection, "sensitivity", suffix="_cluster_ci")
    missed = analysis.tables["missed_findings"]
    parts = [
        "<p><strong>Thresholds in force.</strong> Each needs validation for the local protocol, "
        "scanner and population before its results are interpreted.</p>",
        _table(
            analysis,
            analysis.tables["thresholds"],
            columns={
                "finding": "finding",
                "rule": "rule",
                "derived": "derived",
                "min_segments": "segments for a positive subject",
                "source": "source",
                "caution": "caution",
            },
            caption="Thresholds",
        ),
        _table(
            analysis,
            detection,
            columns=FINDINGS_VIEW,
            caption="Finding-level agreement with the reference",
        ),
        f"<h3>Missed and extra findings ({int((missed['kind'] == 'missed').sum())} missed, "
        f"{int((missed['kind'] == 'extra').sum())} extra)</h3>",
        _table(
            analysis,
            missed,
            columns={
                "kind": "kind",
                "finding": "finding",
                "method": "method",
                "level": "level",
                "subject": "subject",
                "group": "group",
                "segment": "segment",
                "segment_name": "segment name",
                "territory": "territory",
                "reference_value": "reference value",
                "test_value": "test value",
                "reference_threshold": "threshold (reference)",
                "test_threshold": "threshold (test)",
            },
            caption="Every reference-positive unit a test method does not flag, "
            "and every test-only positive",
        )
        if len(missed)
        else "<p>No reference-positive unit was missed and no extra positive was found.</p>",
        _figures(figures, "findings"),
    ]
    return "\n".join(parts)


def fmt_p(p: object) -> str:
    """A p-value as text: below 0.0001 as "<0.0001" (a p of exactly 0 is a rounding)."""
    if p is None or pd.isna(p):
        return "–"
    return "<0.0001" if float(p) < 1e-4 else fmt(float(p))


def _p_text(frame: pd.DataFrame) -> pd.DataFrame:
    out = frame.copy()
    for column in ("p_value", "p_adjusted", "mcnemar_p"):
        if column in out:
            out[column] = out[column].map(fmt_p)
    return out


def _descriptives_view(desc: pd.DataFrame, groups: Sequence[str]) -> pd.DataFrame:
    """Median [Q1, Q3] (n) per group, one row per parameter, method and summary."""
    cell = desc.assign(
        text=[
            "–" if n == 0 else f"{fmt(m)} [{fmt(lo)}, {fmt(hi)}] (n={int(n)})"
            for m, lo, hi, n in zip(
                desc["median"], desc["q1"], desc["q3"], desc["n_subjects"], strict=True
            )
        ]
    )
    wide = cell.pivot_table(
        index=["parameter", "unit", "method", "summary"],
        columns="group",
        values="text",
        aggfunc="first",
        sort=False,
    )
    wide = wide[[g for g in groups if g in wide.columns]].reset_index()
    wide.columns.name = None
    return wide


COMPARISON_VIEW = {
    "parameter": "parameter",
    "method": "method",
    "summary": "summary",
    "test": "test",
    "comparison": "comparison",
    "statistic": "statistic",
    "p_value": "p",
    "p_adjusted": "p adjusted",
    "family": "correction family",
    "effect": "effect size (95% CI)",
    "note": "note",
}

MODEL_VIEW = {
    "parameter": "parameter",
    "method": "method",
    "finding": "finding",
    "model": "model",
    "path": "path",
    "term": "term",
    "estimate_ci": "estimate (95% CI)",
    "p_value": "p",
    "p_adjusted": "p adjusted",
    "n_subjects": "subjects",
    "note": "note",
}


PROPORTION_VIEW = {
    "finding": "finding",
    "method": "method",
    "group": "group",
    "n_subjects": "subjects",
    "n_positive": "positive",
    "proportion_ci": "proportion (95% CI)",
}
FINDING_TEST_VIEW = {
    "finding": "finding",
    "method": "method",
    "test": "test",
    "comparison": "comparison",
    "p_value": "p",
    "p_method": "p-value method",
    "p_adjusted": "p adjusted",
    "note": "note",
}


def _groups_section(analysis: Analysis, figures: Sequence[Any]) -> str:
    t = analysis.tables
    parts = [
        "<p>Per-subject summaries (mean over segments, maximum segment, mean over the culprit "
        "territory) are compared between groups; every row, with all columns, is in "
        "<code>tables/group_*.csv</code> and <code>tables/finding_*.csv</code>.</p>"
    ]
    if "group_descriptives" in t:
        parts.append(
            _table(
                analysis,
                _descriptives_view(t["group_descriptives"], analysis.study.groups),
                caption="Per-subject summaries by group: median [Q1, Q3] (n subjects)",
            )
        )
    if "group_comparison" in t:
        comp = t["group_comparison"].copy()
        comp["effect"] = [
            "–" if pd.isna(e) else f"{name} {fmt(e)} ({fmt(lo)} to {fmt(hi)})"
            for e, name, lo, hi in zip(
                comp["effect_size"],
                comp["effect_size_name"],
                comp["effect_ci_low"],
                comp["effect_ci_high"],
                strict=True,
            )
        ]
        parts.append(
            _table(
                analysis,
                _p_text(comp),
                columns=COMPARISON_VIEW,
                caption="Group comparisons (raw and adjusted p-values)",
            )
        )
    if "finding_proportions" in t and len(t["finding_proportions"]):
        prop = t["finding_proportions"].copy()
        prop["proportion_ci"] = with_ci(prop, "proportion", bounds=("ci_low", "ci_high"))
        parts.append(
            _table(
                analysis,
                prop,
                columns=PROPORTION_VIEW,
                caption="Subjects positive for each finding, by group",
            )
        )
    if "finding_group_tests" in t and len(t["finding_group_tests"]):
        parts.append(
            _table(
                analysis,
                _p_text(t["finding_group_tests"]),
                columns=FINDING_TEST_VIEW,
                caption="Proportions of positive subjects between groups (Fisher)",
            )
        )
    if "group_models" in t and len(t["group_models"]):
        models = t["group_models"].copy()
        models["estimate_ci"] = with_ci(models, "estimate", bounds=("ci_low", "ci_high"))
        models = _p_text(models)
        parts.append(
            _table(
                analysis,
                models,
                columns=MODEL_VIEW,
                caption="Segment-level models respecting clustering",
            )
        )
    parts.append(_figures(figures, "groups"))
    return "\n".join(parts)


def _quality_section(analysis: Analysis) -> str:
    t = analysis.tables
    excl = t["exclusions"]
    reasons = excl.groupby(["status", "reason"]).size().rename("values").reset_index()
    parts = [
        _table(analysis, reasons, caption="Input values not used, by reason")
        if len(reasons)
        else "<p>Every input value was used.</p>",
        _table(
            analysis,
            t["missing_values"],
            caption="Missing (blank) values per method, parameter and segment",
        )
        if len(t["missing_values"])
        else "<p>No missing values.</p>",
        _table(analysis, t["swap_screen"], caption="Fat-water swap screen (fat fraction pairs)"),
    ]
    if len(t["input_warnings"]):
        parts.append(_table(analysis, t["input_warnings"], caption="Input warnings"))
    if analysis.warnings:
        parts.append("<h3>Not estimable and other analysis notes</h3>")
        parts.append(bullet_list(analysis.warnings[:200]))
    return "\n".join(parts)


def _provenance(manifest: Mapping[str, Any]) -> str:
    inputs = pd.DataFrame(
        [
            {
                "input": k,
                "name": v["name"] or "not recorded (pseudonymised run)",
                "sha256": v["sha256"],
                "bytes": v["bytes"],
            }
            for k, v in manifest["inputs"].items()
        ]
    )
    versions = pd.DataFrame([{"package": k, "version": v} for k, v in manifest["packages"].items()])
    options = pd.DataFrame([{"option": k, "value": str(v)} for k, v in manifest["options"].items()])
    return "\n".join(
        [
            table(inputs, caption="Inputs"),
            table(options, caption="Analysis options"),
            table(versions, caption="Software"),
            f"<p>Started {esc(manifest['started'])}, finished {esc(manifest['finished'])}; "
            f"Python {esc(manifest['python'])} on {esc(manifest['platform'])}. The full record "
            "is <code>manifest.json</code>.</p>",
        ]
    )


def render_report(
    analysis: Analysis,
    figures: Sequence[Any],
    methods_markdown: str,
    manifest: Mapping[str, Any],
) -> str:
    """The complete report page as a string."""
    title = analysis.study.settings.title
    sections = [
        ("overview", "Which method is good enough?", _overview(analysis, figures)),
        *_head_to_head(analysis),
        ("study", "Study", _study_section(analysis)),
        ("agreement", "Agreement between methods", _agreement_section(analysis, figures)),
        (
            "findings",
            "Findings: does the test method show the lesions?",
            _findings_section(analysis, figures),
        ),
        ("groups", "Group comparisons", _groups_section(analysis, figures)),
        (
            "maps",
            "Bullseye maps",
            _figures(figures, "maps") or "<p>Figures were not drawn (--no-figures).</p>",
        ),
        ("quality", "Data quality", _quality_section(analysis)),
        ("methods", "Methods and references", markdown_to_html(methods_markdown)),
        ("provenance", "Provenance", _provenance(manifest)),
    ]
    nav = (
        "<nav><ol>"
        + "".join(f'<li><a href="#{a}">{esc(t)}</a></li>' for a, t, _ in sections)
        + "</ol></nav>"
    )
    body = [
        f"<header><h1>{esc(title)}</h1>",
        '<p class="subtitle">Method-agreement and tissue-finding report · '
        f"cohort {esc(__version__)} · generated {esc(manifest['finished'])}</p>",
        f'<div class="caution"><strong>Caution.</strong> {esc(CAUTION_LONG)}</div></header>',
        nav,
        *[section(a, t, b) for a, t, b in sections],
        f"<footer>{esc(CAUTION_LONG)}</footer>",
    ]
    return page(f"{title} · cohort report", "\n".join(body))
