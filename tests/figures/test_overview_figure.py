"""Tests of cohort.figures.overview: the overview forest figure built from the report's tables.

The study is the invented demo cohort (6 subjects, three test methods, acceptance criteria
declared in its study file), analysed without bootstrap so that the tables hold the
analytic and Wilson intervals; other cases change copies of those tables by hand. Every
expected number is read from the tables in the test. The combination of verdicts (fails if
any fails, else inconclusive if any is, else meets) is this package's rule (common practice:
every criterion declared in advance must be met); the limits are judged against a
difference fixed in advance (Bland & Altman 1999, Stat Methods Med Res 8:135-160).
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
import numpy as np
import pytest

from cohort.analysis.pipeline import analyse, options_from_study
from cohort.demo import write_demo
from cohort.figures import figure_set, overview
from cohort.figures.overview import OVERVIEW_KEY, _letters, _overview_figures, _tiers
from cohort.figures.records import SECTIONS, SkippedFigure, _Drawn
from cohort.io.study import load_study
from cohort.plots.method_forest import NOT_ESTIMABLE, VERDICT_WORDS, ForestPanel
from cohort.plots.style import fit_label


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    return load_study(write_demo(tmp_path_factory.mktemp("overview"), n_subjects=6))


@pytest.fixture(scope="module")
def analysed(study):
    tables = analyse(study, options_from_study(study, n_boot=0, figures=False)).tables
    return {k: tables[k] for k in ("agreement", "findings_agreement", "method_verdicts")}


@pytest.fixture
def tables(analysed):
    return {k: v.copy() for k, v in analysed.items()}


@pytest.fixture(autouse=True)
def _close():
    yield
    plt.close("all")


def _drawn(study, tables) -> _Drawn:
    (item,) = list(_overview_figures(study, tables))
    assert isinstance(item, _Drawn), item
    return item


def _panel(fig, key):
    (ax,) = [a for a in fig.axes if a.get_gid() == f"panel:{key}"]
    return ax


def _row_lines(ax, prefix, y):
    return [
        line
        for line in ax.lines
        if str(line.get_gid()).startswith(prefix) and line.get_ydata()[0] == y
    ]


def _segment_all(frame):
    return frame[(frame["level"] == "segment") & (frame["stratum"] == "all")]


def _by_hand(verdicts):
    """fails if any fails, else inconclusive if any is, else meets (common practice)."""
    words = set(verdicts) - {"not-assessed"}
    for word in ("fails", "inconclusive", "meets"):
        if word in words:
            return word
    return "not-assessed"


def test_skipped_without_an_agreement_table(study):
    (item,) = list(_overview_figures(study, {}))
    assert item == SkippedFigure(OVERVIEW_KEY, "no 'agreement' table was given")


def test_skipped_without_rows_over_the_whole_cohort(study, tables):
    tables["agreement"] = tables["agreement"].assign(stratum="group=acute")
    (item,) = list(_overview_figures(study, tables))
    assert isinstance(item, SkippedFigure)
    assert "no 'all' row" in item.reason


def test_demo_overview_rows_panels_and_section(study, tables):
    item = _drawn(study, tables)
    assert (item.key, item.section, item.parameter, item.method) == (
        OVERVIEW_KEY,
        "overview",
        None,
        None,
    )
    assert item.section in SECTIONS
    findings = _segment_all(tables["findings_agreement"])["finding"].unique()
    panels = [a for a in item.fig.axes if str(a.get_gid()).startswith("panel:")]
    assert len(panels) == 3 + 3 + len(findings)  # limits and CCC of ff, r2star, field
    # Methods top to bottom in the study's order, under their display labels.
    names = [t.get_text() for t in _panel(item.fig, "limits:ff").get_yticklabels()]
    assert names == [fit_label(study.method_label(m)) for m in study.test_methods]
    assert study.test_methods == ("net-full", "quickmap", "net-mag1")  # the study file's order
    letters = [t.get_text() for a in panels for t in a.texts if t.get_gid() == "panel-letter"]
    assert letters == list("abcdefgh"[: len(panels)])


def test_band_is_the_declared_difference(study, tables):
    item = _drawn(study, tables)
    verdicts = tables["method_verdicts"]
    for parameter in ("ff", "r2star", "field"):
        rows = verdicts[verdicts["target"] == parameter].set_index("statistic")["criterion"]
        low, high = rows["loa_low"].iloc[0], rows["loa_high"].iloc[0]
        ax = _panel(item.fig, f"limits:{parameter}")
        (band,) = [p for p in ax.patches if p.get_gid() == "acceptance"]
        assert (band.get_x(), band.get_x() + band.get_width()) == pytest.approx((low, high))
    assert (low, high) == (-10.0, 10.0)  # the demo's declared field limit, 10 Hz
    sens = verdicts[verdicts["statistic"] == "sensitivity"]
    finding = sens["target"].iloc[0]
    (line,) = [
        ln for ln in _panel(item.fig, f"sensitivity:{finding}").lines if ln.get_gid() == "criterion"
    ]
    assert line.get_xdata()[0] == sens["criterion"].iloc[0]


def test_verdict_words_and_markers(study, tables):
    item = _drawn(study, tables)
    verdicts = tables["method_verdicts"]
    last = _panel(
        item.fig, f"sensitivity:{_segment_all(tables['findings_agreement'])['finding'].iloc[-1]}"
    )
    (right,) = [c for c in last.child_axes if c.get_gid() == "verdicts"]
    words = [t.get_text() for t in right.get_yticklabels()]
    expected = [
        VERDICT_WORDS[_by_hand(verdicts.loc[verdicts["method"] == m, "verdict"])]
        for m in study.test_methods
    ]
    assert words == expected
    ax = _panel(item.fig, "limits:ff")
    for y, method in enumerate(study.test_methods):
        part = verdicts[(verdicts["method"] == method) & (verdicts["target"] == "ff")]
        limits = part[part["statistic"].isin(["loa_low", "loa_high"])]["verdict"]
        (marker,) = _row_lines(ax, "estimate:", y)
        assert marker.get_gid() == f"estimate:{_by_hand(limits)}"


def test_panel_verdict_needs_both_limits(study, tables):
    verdicts = tables["method_verdicts"]
    cases = {
        "net-full": ("meets", "fails"),
        "quickmap": ("meets", "inconclusive"),
        "net-mag1": ("meets", "meets"),
    }
    for method, (low, high) in cases.items():
        at = (verdicts["method"] == method) & (verdicts["target"] == "r2star")
        verdicts.loc[at & (verdicts["statistic"] == "loa_low"), "verdict"] = low
        verdicts.loc[at & (verdicts["statistic"] == "loa_high"), "verdict"] = high
    ax = _panel(_drawn(study, tables).fig, "limits:r2star")
    gids = [_row_lines(ax, "estimate:", y)[0].get_gid() for y in range(3)]
    assert gids == ["estimate:fails", "estimate:inconclusive", "estimate:meets"]


def test_caption_names_the_intervals_drawn(study, tables):
    item = _drawn(study, tables)
    caption = item.caption
    # No bootstrap: the verdicts' fallbacks, the analytic and the Wilson interval, are drawn.
    assert "analytic interval" in caption
    assert "Wilson score" in caption and "clustered in subjects" in caption
    assert "declared in advance" in caption
    assert "kappa" not in caption  # the findings table's ci_method also names kappa's
    findings = _segment_all(tables["findings_agreement"])
    row = findings[findings["method"] == "net-mag1"].iloc[0]
    ax = _panel(item.fig, f"sensitivity:{row['finding']}")
    (interval,) = _row_lines(ax, "interval", 2)
    expected = [row["sensitivity_ci_low"], row["sensitivity_ci_high"]]
    assert list(interval.get_xdata()) == pytest.approx(expected)


def test_cluster_interval_is_preferred(study, tables):
    findings = tables["findings_agreement"]
    findings["sensitivity_cluster_ci_low"] = 0.05
    findings["sensitivity_cluster_ci_high"] = 0.95
    findings["cluster_ci_method"] = "subject cluster bootstrap, percentile, B=99, seed=7"
    quick = (findings["method"] == "quickmap") & (findings["finding"] == "fat")
    findings.loc[quick, ["sensitivity_cluster_ci_low", "sensitivity_cluster_ci_high"]] = np.nan
    item = _drawn(study, tables)
    (interval,) = _row_lines(_panel(item.fig, "sensitivity:hemorrhage"), "interval", 0)
    assert list(interval.get_xdata()) == [0.05, 0.95]
    assert "B=99, seed=7" in item.caption
    # The one fallback is named with its method and panel letter (fat: the last panel).
    panels = [a for a in item.fig.axes if str(a.get_gid()).startswith("panel:")]
    assert panels[-1].get_gid() == "panel:sensitivity:fat"
    letter = "abcdefghijklmnopqrstuvwxyz"[len(panels) - 1]
    assert f"for '{study.method_label('quickmap')}' ({letter}): Wilson score" in item.caption


def test_not_estimable_rows(study, tables):
    agreement = tables["agreement"]
    at = (agreement["method"] == "quickmap") & (agreement["parameter"] == "field")
    agreement.loc[at, [c for c in agreement.columns if c.startswith("ccc")]] = np.nan
    item = _drawn(study, tables)
    ax = _panel(item.fig, "ccc:field")
    texts = [(t.get_text(), t.get_position()[1]) for t in ax.texts if t.get_gid() == "no-estimate"]
    assert texts == [(NOT_ESTIMABLE, 1)]  # quickmap is the second row
    assert "'not estimable'" in item.caption


def test_one_test_method_still_draws(study, tables):
    for name in tables:
        tables[name] = tables[name][tables[name]["method"].isin(["quickmap", study.reference])]
    item = _drawn(study, tables)
    names = [t.get_text() for t in _panel(item.fig, "ccc:ff").get_yticklabels()]
    assert names == [study.method_label("quickmap")]
    assert item.title.startswith("Overview: 1 test method(s)")


def test_without_criteria_no_verdicts(study, tables):
    del tables["method_verdicts"]
    item = _drawn(study, tables)
    assert not any(c.get_gid() == "verdicts" for a in item.fig.axes for c in a.child_axes)
    assert not any(p.get_gid() == "acceptance" for a in item.fig.axes for p in a.patches)
    assert "No acceptance criteria were declared" in item.caption


def test_without_findings_only_agreement_panels(study, tables):
    del tables["findings_agreement"]
    item = _drawn(study, tables)
    panels = [a for a in item.fig.axes if str(a.get_gid()).startswith("panel:")]
    assert len(panels) == 6
    assert "sensitivity" not in item.caption.split("Panels d")[1].split(".")[0]


def test_labels_come_from_one_function(study, tables, monkeypatch):
    monkeypatch.setattr(overview, "_method_label", lambda study, method: f"<{method}>")
    item = _drawn(study, tables)
    names = [t.get_text() for t in _panel(item.fig, "limits:ff").get_yticklabels()]
    assert names == [f"<{m}>" for m in study.test_methods]


def test_tiers_and_letters():
    assert _tiers(3, 5) == [3, 5]  # limits above, CCC and sensitivity below
    assert _tiers(1, 2) == [3]  # few panels: one tier
    assert _tiers(3, 8) == [3, 5, 3]
    assert _tiers(5, 0) == [4, 1]
    panels = [ForestPanel(f"p{k}", "ccc", "t") for k in range(3)]
    assert _letters(panels, "ccc") == "a\N{EN DASH}c"
    assert _letters(panels[:2], "ccc") == "a, b"


def test_make_figures_draws_the_overview_first(study, tables, tmp_path, monkeypatch):
    others = [
        "_agreement_figures",
        "_prevalence_figures",
        "_subject_figure",
        "_median_figures",
        "_difference_figures",
        "_group_figures",
        "_paired_figures",
    ]
    for name in others:  # only the order of the parts is under test here
        monkeypatch.setattr(figure_set, name, lambda *args: iter(()))
    drawn = figure_set.make_figures(study, tables, tmp_path, formats=("png",), dpi=40)
    assert [r.key for r in drawn] == [OVERVIEW_KEY]
    assert drawn[0].section == "overview"
    assert drawn[0].paths[0].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG spec, 5.2
    assert drawn[0].caption == _drawn(study, tables).caption
