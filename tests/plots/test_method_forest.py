"""Tests of cohort.plots.method_forest: the drawn artists of the forest panels.

The numbers drawn are invented; nothing is estimated by the function, so every check
compares an artist with the number passed in. The conventions checked are this package's
(common practice for forest plots): methods top to bottom in the given order, limits of
agreement as two limits joined by a line (Bland & Altman 1986, Lancet i:307-310), the
acceptance band (-L, +L) of a clinically acceptable difference fixed in advance (Bland &
Altman 1999, Stat Methods Med Res 8:135-160), verdicts told apart by marker shape and not
by colour alone (Wong 2011, Nature Methods 8:441).
"""

from __future__ import annotations

import math

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
import pytest
from matplotlib.colors import to_rgba
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle

from cohort.plots.method_forest import (
    NO_RESULT,
    NOT_ESTIMABLE,
    VERDICT_STYLES,
    VERDICT_WORDS,
    VERDICTS,
    ForestPanel,
    method_forest,
    panel_letter,
)

METHODS = ["zeta fit", "alpha net", "mid map"]  # deliberately not in alphabetical order
LIMITS = ForestPanel("lim", "limits", "fat fraction", parameter="ff", band=(-3.0, 3.0))
CCC = ForestPanel("ccc", "ccc", "fat fraction", criterion=0.9)
SENS = ForestPanel("sens", "sensitivity", "hemorrhage", criterion=0.8)


def _limit_row(method, bias, low, high, verdict=None, half=0.2):
    return {
        "method": method,
        "panel": "lim",
        "estimate": bias,
        "ci_low": bias - 0.1,
        "ci_high": bias + 0.1,
        "low": low,
        "low_ci_low": low - half,
        "low_ci_high": low + half,
        "high": high,
        "high_ci_low": high - half,
        "high_ci_high": high + half,
        "verdict": verdict,
    }


def _point_row(method, panel, estimate, low, high, verdict=None):
    return {
        "method": method,
        "panel": panel,
        "estimate": estimate,
        "ci_low": low,
        "ci_high": high,
        "verdict": verdict,
    }


@pytest.fixture
def rows():
    return pd.DataFrame(
        [
            _limit_row("zeta fit", 0.5, -1.5, 2.5, "meets"),
            _limit_row("alpha net", -0.2, -4.0, 3.6, "fails"),
            _limit_row("mid map", 0.1, -2.9, 3.1, "inconclusive"),
            _point_row("zeta fit", "ccc", 0.95, 0.92, 0.97, "meets"),
            _point_row("alpha net", "ccc", math.nan, math.nan, math.nan, None),
            _point_row("mid map", "ccc", 0.91, 0.86, 0.94, "inconclusive"),
            _point_row("zeta fit", "sens", 0.85, 0.81, 0.9, "meets"),
            _point_row("alpha net", "sens", 0.5, 0.3, 0.7, "fails"),
            # mid map has no sensitivity row at all
        ]
    )


@pytest.fixture(autouse=True)
def _close():
    yield
    plt.close("all")


def _draw(rows, **kwargs):
    kwargs.setdefault(
        "summary", {"zeta fit": "meets", "alpha net": "fails", "mid map": "inconclusive"}
    )
    return method_forest(rows, panels=[LIMITS, CCC, SENS], methods=METHODS, **kwargs)


def _panel(fig, key):
    (ax,) = [a for a in fig.axes if a.get_gid() == f"panel:{key}"]
    return ax


def _lines(ax, prefix):
    return [line for line in ax.lines if str(line.get_gid()).startswith(prefix)]


def _texts(ax, gid):
    return [t for t in ax.texts if t.get_gid() == gid]


def test_methods_are_rows_top_to_bottom_in_the_given_order(rows):
    fig = _draw(rows, labels={"alpha net": "Alpha network"})
    ax = _panel(fig, "lim")
    names = [t.get_text() for t in ax.get_yticklabels()]
    assert names == ["zeta fit", "Alpha network", "mid map"]
    # The first method is drawn highest: screen y decreases down the list.
    markers = _lines(ax, "estimate:")
    screen_y = [ax.transData.transform((m.get_xdata()[0], m.get_ydata()[0]))[1] for m in markers]
    assert [m.get_ydata()[0] for m in markers] == [0, 1, 2]
    assert screen_y[0] > screen_y[1] > screen_y[2]
    lower, upper = ax.get_ylim()
    assert lower > upper  # the y axis runs downwards, set explicitly


def test_one_row_per_method_in_every_panel(rows):
    fig = _draw(rows)
    # limits: three methods with both limits -> three bias markers, six limit ticks.
    assert len(_lines(_panel(fig, "lim"), "estimate:")) == 3
    assert len(_lines(_panel(fig, "lim"), "limit:")) == 6
    # ccc: one NaN row -> two markers and the words "not estimable" in its row.
    ccc = _panel(fig, "ccc")
    assert len(_lines(ccc, "estimate:")) == 2
    (words,) = _texts(ccc, "no-estimate")
    assert (words.get_text(), words.get_position()[1]) == (NOT_ESTIMABLE, 1)
    # sensitivity: no row for "mid map" -> "no result" in the third row.
    sens = _panel(fig, "sens")
    assert len(_lines(sens, "estimate:")) == 2
    (words,) = _texts(sens, "no-estimate")
    assert (words.get_text(), words.get_position()[1]) == (NO_RESULT, 2)


def test_limits_and_their_intervals_are_drawn_where_given(rows):
    ax = _panel(_draw(rows), "lim")
    (span,) = [s for s in _lines(ax, "limits-span") if s.get_ydata()[0] == 1]
    assert list(span.get_xdata()) == [-4.0, 3.6]
    low_ci = [s for s in _lines(ax, "limit-interval:low") if s.get_ydata()[0] == 1]
    assert list(low_ci[0].get_xdata()) == pytest.approx([-4.2, -3.8])
    bias = next(m for m in _lines(ax, "estimate:") if m.get_ydata()[0] == 1)
    assert bias.get_xdata()[0] == -0.2


def test_acceptance_band_spans_the_criterion(rows):
    ax = _panel(_draw(rows), "lim")
    (band,) = [p for p in ax.patches if p.get_gid() == "acceptance"]
    assert isinstance(band, Rectangle)
    assert (band.get_x(), band.get_x() + band.get_width()) == pytest.approx((-3.0, 3.0))
    edges = sorted(line.get_xdata()[0] for line in _lines(ax, "band-edge"))
    assert edges == [-3.0, 3.0]
    (zero,) = _lines(ax, "zero")
    assert zero.get_xdata()[0] == 0.0
    # Symmetric about zero, and the band and every limit fit inside.
    left, right = ax.get_xlim()
    assert left == pytest.approx(-right)
    assert right > 4.2


def test_criterion_line_and_shaded_side(rows):
    fig = _draw(rows)
    for key, value in (("ccc", 0.9), ("sens", 0.8)):
        ax = _panel(fig, key)
        (line,) = _lines(ax, "criterion")
        assert line.get_xdata()[0] == value
        (shade,) = [p for p in ax.patches if p.get_gid() == "acceptance"]
        assert shade.get_x() == pytest.approx(value)
        assert shade.get_x() + shade.get_width() == pytest.approx(ax.get_xlim()[1])
    # Sensitivity axes show the whole 0-1 range; CCC ends just past its maximum, 1.
    assert _panel(fig, "sens").get_xlim()[0] < 0 < 1 < _panel(fig, "sens").get_xlim()[1]
    assert 1.0 <= _panel(fig, "ccc").get_xlim()[1] < 1.01


def test_verdicts_differ_in_shape_not_only_in_colour(rows):
    shapes = {style.marker + ("f" if style.filled else "o") for style in VERDICT_STYLES.values()}
    assert len(shapes) == len(VERDICTS)
    ax = _panel(_draw(rows), "lim")
    by_row = {int(m.get_ydata()[0]): m for m in _lines(ax, "estimate:")}
    for y, verdict in enumerate(["meets", "fails", "inconclusive"]):
        style = VERDICT_STYLES[verdict]
        assert by_row[y].get_marker() == style.marker
        assert to_rgba(by_row[y].get_markeredgecolor()) == to_rgba(style.colour)
        assert by_row[y].get_gid() == f"estimate:{verdict}"


def test_verdict_words_at_the_right(rows):
    fig = _draw(rows)
    ax = _panel(fig, "sens")  # the last panel of the only tier
    (right,) = [c for c in ax.child_axes if c.get_gid() == "verdicts"]
    words = [t.get_text() for t in right.get_yticklabels()]
    assert words == ["meets", "fails", "inconclusive"]
    colours = [to_rgba(t.get_color()) for t in right.get_yticklabels()]
    assert colours[1] == to_rgba(VERDICT_STYLES["fails"].colour)
    assert not [c for c in _panel(fig, "lim").child_axes if c.get_gid() == "verdicts"]


def test_no_summary_no_words(rows):
    fig = _draw(rows.drop(columns="verdict"), summary=None)
    assert not any(c.get_gid() == "verdicts" for ax in fig.axes for c in ax.child_axes)
    marker = _lines(_panel(fig, "ccc"), "estimate:")[0]
    assert marker.get_gid() == "estimate:none"


def test_panel_letters_in_order(rows):
    fig = _draw(rows, tiers=(1, 2))
    letters = [t.get_text() for ax in fig.axes for t in ax.texts if t.get_gid() == "panel-letter"]
    assert letters == ["a", "b", "c"]
    assert [ax.get_title(loc="left") for ax in fig.axes[:3]] == [
        "fat fraction",
        "fat fraction",
        "hemorrhage",
    ]
    assert len(fig.subfigs) == 2
    assert (panel_letter(25), panel_letter(27)) == ("z", "ab")


def test_axis_labels_name_quantity_and_unit(rows):
    fig = _draw(rows)
    assert _panel(fig, "lim").get_xlabel() == "limits of agreement (%)"  # ff in percent
    assert _panel(fig, "ccc").get_xlabel() == "CCC"
    assert _panel(fig, "sens").get_xlabel() == "sensitivity"
    r2 = ForestPanel("r", "limits", "R2*", parameter="r2star")
    assert r2.axis_label == "limits of agreement (1/s)"


def test_legend_lists_the_verdicts_present(rows):
    fig = _draw(rows)
    texts = [t.get_text() for t in fig.legends[0].get_texts()]
    assert texts == [VERDICT_WORDS[v] for v in ("meets", "fails", "inconclusive")] + [
        "acceptable",
        "CI of each limit",
    ]


def test_one_method_draws():
    rows = pd.DataFrame([_point_row("only", "sens", 0.6, 0.4, 0.8)])
    fig = method_forest(rows, panels=[SENS], methods=["only"])
    ax = fig.axes[0]
    assert [t.get_text() for t in ax.get_yticklabels()] == ["only"]
    (interval,) = _lines(ax, "interval")
    assert list(interval.get_xdata()) == [0.4, 0.8]


def test_missing_interval_draws_the_estimate_alone():
    rows = pd.DataFrame([_point_row("only", "ccc", 0.93, math.nan, math.nan)])
    ax = method_forest(rows, panels=[CCC], methods=["only"]).axes[0]
    assert len(_lines(ax, "estimate:")) == 1
    assert not _lines(ax, "interval")


def test_limits_nan_draws_not_estimable():
    rows = pd.DataFrame([_limit_row("only", math.nan, math.nan, math.nan)])
    ax = method_forest(rows, panels=[LIMITS], methods=["only"]).axes[0]
    assert [t.get_text() for t in _texts(ax, "no-estimate")] == [NOT_ESTIMABLE]
    assert not _lines(ax, "limit")


def test_draws_into_a_given_figure(rows):
    fig = Figure()
    assert _draw(rows, fig=fig) is fig
    with pytest.raises(ValueError, match="fig must be an empty"):
        _draw(rows, fig=fig)


def test_size_follows_the_methods_and_tiers(rows):
    one = _draw(rows).get_size_inches()
    two = _draw(rows, tiers=(1, 2)).get_size_inches()
    assert one[0] == pytest.approx(183 / 25.4)  # double column (style.FIGURE_WIDTHS_MM)
    assert two[1] > one[1]


def test_saves(rows, tmp_path):
    fig = _draw(rows, tiers=(1, 2))
    fig.savefig(tmp_path / "forest.png", dpi=80)
    assert (tmp_path / "forest.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG spec 5.2


@pytest.mark.parametrize(
    ("change", "match"),
    [
        (lambda r: r.drop(columns="ci_low"), "missing \\['ci_low'\\]"),
        (lambda r: r.drop(columns=["low", "high"]), "limits panels need the columns"),
        (lambda r: pd.concat([r, r.iloc[:1]]), "one row per \\(method, panel\\)"),
        (lambda r: r.assign(verdict="good"), "verdict must be one of"),
        (lambda r: r.assign(method="other"), "not among the methods given"),
        (lambda r: r.assign(estimate="high"), "Unable to parse|could not convert"),
    ],
)
def test_bad_rows_are_refused(rows, change, match):
    with pytest.raises(ValueError, match=match):
        _draw(change(rows))


@pytest.mark.parametrize(
    ("make", "match"),
    [
        (lambda: ForestPanel("x", "icc", "t"), "kind must be one of"),
        (lambda: ForestPanel("x", "limits", "t", parameter="t1"), "parameter must be one of"),
        (lambda: ForestPanel("x", "limits", "t", parameter="ff", band=(2, -2)), "low < high"),
        (lambda: ForestPanel("x", "limits", "t", parameter="ff", criterion=1), "takes band"),
        (lambda: ForestPanel("x", "ccc", "t", band=(-1, 1)), "takes criterion"),
        (lambda: ForestPanel("x", "sensitivity", "t", criterion=1.2), "must lie in \\[0, 1\\]"),
        (lambda: ForestPanel("x", "ccc", "t", criterion=-1.5), "must lie in \\[-1, 1\\]"),
    ],
)
def test_bad_panels_are_refused(make, match):
    with pytest.raises(ValueError, match=match):
        make()


def test_bad_arguments_are_refused(rows):
    with pytest.raises(ValueError, match="tiers must be positive panel counts"):
        _draw(rows, tiers=(1, 1))
    with pytest.raises(ValueError, match="methods must be a non-empty sequence"):
        method_forest(rows, panels=[LIMITS, CCC, SENS], methods=[*METHODS, "zeta fit"])
    with pytest.raises(ValueError, match="panels must have distinct keys"):
        method_forest(rows, panels=[LIMITS, LIMITS], methods=METHODS)
    with pytest.raises(ValueError, match=r"summary\['mid map'\] must be one of"):
        _draw(rows, summary={"mid map": "ok"})
    with pytest.raises(ValueError, match="rows must be a pandas DataFrame"):
        method_forest(np.zeros(3), panels=[LIMITS], methods=METHODS)
    with pytest.raises(ValueError, match="index must be >= 0"):
        panel_letter(-1)
