"""Tests of cohort.plots.agreement_plots: the drawn artists against the plot definitions.

- Bland JM, Altman DG. Lancet 1986;i:307-310: x = mean of the two methods, y = difference,
  horizontal lines at the bias and the limits of agreement.
- Bland JM, Altman DG. Stat Methods Med Res 1999;8:135-160: ratio test/reference on a log
  axis; regression-based limits as lines in the mean.
The numbers plotted are invented; the statistics are passed in, not computed here.
"""

from __future__ import annotations

import copy

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
import pytest
from matplotlib.collections import PathCollection, PolyCollection
from matplotlib.colors import to_rgba

from cohort.domain.units import PARAMETERS
from cohort.plots.agreement_plots import DENSITY_THRESHOLD, bland_altman_plot, method_scatter
from cohort.plots.limit_lines import group_key, limit_key, scatter_key, shared_legend
from cohort.plots.style import CATEGORICAL, save_figure

LIMITS = {
    "bias": 0.4,
    "bias_ci_low": 0.25,
    "bias_ci_high": 0.55,
    "loa_low": -1.2,
    "loa_high": 2.0,
    "loa_low_ci_low": -1.5,
    "loa_low_ci_high": -0.9,
    "loa_high_ci_low": 1.7,
    "loa_high_ci_high": 2.3,
    "confidence_level": 0.95,
}


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    plt.close("all")


def _pairs(n: int = 60, seed: int = 0):
    rng = np.random.default_rng(seed)
    reference = rng.gamma(2.0, 3.0, n) + 0.5
    test = reference + rng.normal(0.4, 0.8, n)
    return reference, test


def _by_gid(ax, gid):
    found = [a for a in ax.get_children() if a.get_gid() == gid]
    assert len(found) == 1, (gid, found)
    return found[0]


def _legend_texts(ax):
    return [t.get_text() for t in ax.get_legend().get_texts()]


def test_points_are_mean_against_difference():
    # Bland & Altman 1986: x = (reference + test) / 2, y = test - reference.
    reference, test = _pairs()
    ax = bland_altman_plot(reference, test, limits=LIMITS)
    offsets = _by_gid(ax, "points").get_offsets()
    np.testing.assert_allclose(offsets[:, 0], (reference + test) / 2.0)
    np.testing.assert_allclose(offsets[:, 1], test - reference)


def test_bias_and_limit_lines_with_ci_bands():
    reference, test = _pairs()
    ax = bland_altman_plot(reference, test, limits=LIMITS)
    for name in ("bias", "loa_low", "loa_high"):
        np.testing.assert_allclose(_by_gid(ax, name).get_ydata(), LIMITS[name])
        band = _by_gid(ax, f"{name}-ci")
        low, high = LIMITS[f"{name}_ci_low"], LIMITS[f"{name}_ci_high"]
        assert band.get_y() == pytest.approx(low)
        assert band.get_y() + band.get_height() == pytest.approx(high)
    assert _by_gid(ax, "bias").get_linestyle() == "-"
    assert _by_gid(ax, "loa_low").get_linestyle() == "--"
    texts = _legend_texts(ax)
    assert texts[0] == "bias 0.40 (95% CI 0.25 to 0.55)"
    assert texts[1] == "limits of agreement \N{MINUS SIGN}1.20 to 2.00"
    low, high = ax.get_ylim()
    assert low <= LIMITS["loa_low_ci_low"] and high >= LIMITS["loa_high_ci_high"]


def test_axis_labels_carry_quantity_and_unit():
    reference, test = _pairs()
    ax = bland_altman_plot(
        reference, test, parameter="r2star", reference_name="fit", test_name="fast"
    )
    unit_label = PARAMETERS["r2star"].axis_label
    assert ax.get_xlabel() == f"mean of fit and fast, {unit_label}"
    assert ax.get_ylabel() == f"fast \N{MINUS SIGN} fit, {unit_label}"


def test_not_estimable_ci_is_said_not_hidden():
    reference, test = _pairs()
    limits = {**LIMITS, "bias_ci_low": float("nan"), "bias_ci_high": float("nan")}
    ax = bland_altman_plot(reference, test, limits=limits)
    assert not [a for a in ax.get_children() if a.get_gid() == "bias-ci"]
    texts = _legend_texts(ax)
    assert texts[0] == "bias 0.40"
    assert "95% CI not estimable: bias" in texts


def test_ratio_plot_on_a_log_axis():
    # Bland & Altman 1999: ratio test/reference against the mean, log scale, line at 1.
    reference, test = _pairs()
    limits = {"bias": 1.05, "loa_low": 0.8, "loa_high": 1.3}
    ax = bland_altman_plot(reference, test, limits=limits, ratio=True)
    assert ax.get_yscale() == "log"
    np.testing.assert_allclose(_by_gid(ax, "points").get_offsets()[:, 1], test / reference)
    np.testing.assert_allclose(_by_gid(ax, "bias").get_ydata(), 1.05)
    assert ax.get_ylabel() == "ratio test / reference"
    tick_text = [t.get_text() for t in ax.get_yticklabels()]
    assert "1" in tick_text and not any("10^" in t or "times" in t for t in tick_text)
    with pytest.raises(ValueError, match="ratio=True needs positive reference and test"):
        bland_altman_plot([1.0, -1.0], [1.0, 2.0], ratio=True)
    with pytest.raises(ValueError, match="positive limits"):
        bland_altman_plot(reference, test, limits={**limits, "loa_low": -0.1}, ratio=True)


def test_regression_based_limits_are_lines_in_the_mean():
    # Bland & Altman 1999, regression-based limits: each line is a + b * mean.
    reference, test = _pairs()
    limits = {
        **LIMITS,
        "bias_intercept": 0.1,
        "bias_slope": 0.05,
        "loa_low_intercept": -0.8,
        "loa_low_slope": -0.1,
        "loa_high_intercept": 1.0,
        "loa_high_slope": 0.2,
    }
    ax = bland_altman_plot(reference, test, limits=limits)
    for name in ("bias", "loa_low", "loa_high"):
        line = _by_gid(ax, f"{name}-regression")
        x = line.get_xdata()
        np.testing.assert_allclose(
            line.get_ydata(), limits[f"{name}_intercept"] + limits[f"{name}_slope"] * x
        )
    mean = (reference + test) / 2
    assert line.get_xdata().min() == pytest.approx(mean.min())
    assert not [a for a in ax.get_children() if a.get_gid() == "bias"]  # not both kinds
    ax = bland_altman_plot(reference, test, limits=limits, limit_type="constant")
    assert _by_gid(ax, "bias") is not None
    with pytest.raises(ValueError, match="limit_type='regression' needs finite limits keys"):
        bland_altman_plot(reference, test, limits=LIMITS, limit_type="regression")


def test_groups_get_okabe_ito_colours_and_distinct_markers():
    reference, test = _pairs()
    groups = np.where(np.arange(reference.size) % 3 == 0, "MI", "control")
    ax = bland_altman_plot(reference, test, limits=LIMITS, groups=groups)
    control, mi = _by_gid(ax, "points-control"), _by_gid(ax, "points-MI")
    np.testing.assert_allclose(control.get_facecolor()[0][:3], to_rgba(CATEGORICAL[1])[:3])
    np.testing.assert_allclose(mi.get_facecolor()[0][:3], to_rgba(CATEGORICAL[0])[:3])
    marker_a = control.get_paths()[0].vertices
    marker_b = mi.get_paths()[0].vertices
    assert marker_a.shape != marker_b.shape or not np.allclose(marker_a, marker_b)
    assert len(mi.get_offsets()) == int((groups == "MI").sum())
    assert "MI (n = 20)" in _legend_texts(ax)


def test_density_above_the_threshold():
    # Common practice: beyond a few thousand pairs, points overplot; a 2-D histogram does not.
    n = DENSITY_THRESHOLD + 500
    reference, test = _pairs(n)
    ax = bland_altman_plot(reference, test, limits=LIMITS)
    density = _by_gid(ax, "density")
    assert isinstance(density, PolyCollection)
    assert density.get_array().sum() == n  # every pair counted once
    assert not [a for a in ax.get_children() if a.get_gid() == "points"]
    ax = bland_altman_plot(reference, test, density=False)
    points = _by_gid(ax, "points")
    assert isinstance(points, PathCollection) and points.get_rasterized()
    small = bland_altman_plot(*_pairs(100))
    assert _by_gid(small, "points") is not None
    groups = np.arange(n) % 2
    ax = bland_altman_plot(reference, test, groups=groups)  # auto keeps grouped points
    assert _by_gid(ax, "points-0") is not None
    with pytest.raises(ValueError, match="density=True cannot show groups"):
        bland_altman_plot(reference, test, groups=groups, density=True)


def test_input_errors_name_the_argument():
    reference, test = _pairs()
    with pytest.raises(ValueError, match="same length, got 60 and 59"):
        bland_altman_plot(reference, test[:-1])
    bad = test.copy()
    bad[3] = np.nan
    with pytest.raises(ValueError, match="must be finite, got 1 non-finite pair"):
        bland_altman_plot(reference, bad)
    with pytest.raises(ValueError, match=r"limits must hold keys \['loa_high'\]"):
        bland_altman_plot(reference, test, limits={"bias": 0.0, "loa_low": -1.0})
    with pytest.raises(ValueError, match="parameter must be one of"):
        bland_altman_plot(reference, test, parameter="t1")
    with pytest.raises(ValueError, match="density must be"):
        bland_altman_plot(reference, test, density="hex")


def test_method_scatter_identity_fit_ccc_and_equal_axes():
    reference, test = _pairs()
    line = {"slope": 1.08, "intercept": -0.05, "procedure": "Passing-Bablok"}
    ax = method_scatter(reference, test, line=line, ccc=0.934, ccc_ci=(0.9, 0.96))
    offsets = _by_gid(ax, "points").get_offsets()
    np.testing.assert_allclose(offsets[:, 0], reference)  # x = reference (data contract)
    np.testing.assert_allclose(offsets[:, 1], test)
    identity = _by_gid(ax, "identity")
    assert identity.get_slope() == 1.0
    x1, y1 = identity.get_xy1()
    assert x1 == pytest.approx(y1)
    fit = _by_gid(ax, "fit")
    assert fit.get_slope() == pytest.approx(1.08)
    assert fit.get_xy1() == pytest.approx((0.0, -0.05))
    assert ax.get_xlim() == pytest.approx(ax.get_ylim())
    assert ax.get_aspect() == 1.0
    low, high = ax.get_xlim()
    assert low < min(reference.min(), test.min()) and high > max(reference.max(), test.max())
    texts = _legend_texts(ax)
    assert "CCC = 0.934 (0.900 to 0.960)" in texts
    assert any(t.startswith("Passing-Bablok: y = 1.080 x \N{MINUS SIGN} 0.05") for t in texts)
    unit_label = PARAMETERS["ff"].axis_label
    assert ax.get_xlabel() == f"reference, {unit_label}"
    assert ax.get_ylabel() == f"test, {unit_label}"


def test_method_scatter_density_and_errors():
    n = DENSITY_THRESHOLD + 1
    reference, test = _pairs(n)
    ax = method_scatter(reference, test, ccc=float("nan"))
    assert isinstance(_by_gid(ax, "density"), PolyCollection)
    assert "CCC not estimable" in _legend_texts(ax)
    with pytest.raises(ValueError, match="line must hold keys 'slope' and 'intercept'"):
        method_scatter(reference, test, line={"slope": 1.0})
    with pytest.raises(ValueError, match="ccc must be a number"):
        method_scatter(reference, test, ccc="high")


def test_plots_leave_their_inputs_unchanged():
    reference, test = _pairs()
    groups = pd.Series(np.where(np.arange(60) % 2 == 0, "a", "b"))
    limits = pd.Series(LIMITS)
    saved = (reference.copy(), test.copy(), groups.copy(), limits.copy())
    line = {"slope": 1.0, "intercept": 0.0, "procedure": "Deming"}
    line_saved = copy.deepcopy(line)
    bland_altman_plot(reference, test, limits=limits, groups=groups)
    bland_altman_plot(list(reference), list(test), ratio=True)
    method_scatter(reference, test, line=line, groups=groups)
    np.testing.assert_array_equal(reference, saved[0])
    np.testing.assert_array_equal(test, saved[1])
    pd.testing.assert_series_equal(groups, saved[2])
    pd.testing.assert_series_equal(limits, saved[3])
    assert line == line_saved


def test_agreement_figures_write_png_and_svg(tmp_path):
    reference, test = _pairs()
    figures = {
        "ba": bland_altman_plot(reference, test, limits=LIMITS).figure,
        "scatter": method_scatter(reference, test, ccc=0.9).figure,
    }
    for name, fig in figures.items():
        for path in save_figure(fig, tmp_path / name, dpi=100):
            assert path.stat().st_size > 1000, path
    fig, axes = plt.subplots(1, 2)  # drawing on given axes returns those axes
    assert bland_altman_plot(reference, test, ax=axes[0]) is axes[0]
    assert method_scatter(reference, test, ax=axes[1]) is axes[1]


# --- panels of a figure with one shared key ----------------------------------------------------


def test_text_key_writes_the_numbers_above_the_axes_not_a_legend():
    reference, test = _pairs()
    ax = bland_altman_plot(reference, test, limits=LIMITS, key="text")
    assert ax.get_legend() is None
    numbers = _by_gid(ax, "numbers")
    assert numbers.get_text() == (
        "bias 0.40 (95% CI 0.25 to 0.55)\nlimits \N{MINUS SIGN}1.20 to 2.00"
    )
    assert numbers.xycoords == "axes fraction" and numbers.xy == (0.5, 1.0)  # above the axes
    ax = bland_altman_plot(reference, test, limits=LIMITS, key="text", decimals=3)
    assert _by_gid(ax, "numbers").get_text().startswith("bias 0.400 (95% CI 0.250 to 0.550)")
    limits = {**LIMITS, "loa_low_ci_low": float("nan"), "loa_low_ci_high": float("nan")}
    ax = bland_altman_plot(reference, test, limits=limits, key="text")
    assert _by_gid(ax, "numbers").get_text().endswith("95% CI not estimable")
    ax = bland_altman_plot(reference, test, limits=LIMITS, key="none")
    assert ax.get_legend() is None and not ax.texts
    with pytest.raises(ValueError, match="key must be one of"):
        bland_altman_plot(reference, test, key="below")


def test_ratio_text_names_the_mean_ratio():
    reference, test = _pairs()
    limits = {"bias": 1.05, "loa_low": 0.8, "loa_high": 1.3}
    ax = bland_altman_plot(reference, test, limits=limits, ratio=True, key="text")
    assert _by_gid(ax, "numbers").get_text() == "mean ratio 1.050\nlimits 0.800 to 1.300"


def test_scatter_text_key_and_given_axis_limits():
    reference, test = _pairs()
    line = {"slope": 1.08, "intercept": -0.05, "procedure": "Passing-Bablok"}
    ax = method_scatter(reference, test, line=line, ccc=0.934, axis_limits=(-5.0, 40.0), key="text")
    assert ax.get_legend() is None
    assert ax.get_xlim() == (-5.0, 40.0) and ax.get_ylim() == (-5.0, 40.0)
    text = _by_gid(ax, "numbers").get_text()
    assert text.startswith("y = 1.080 x \N{MINUS SIGN} 0.05") and text.endswith("CCC = 0.934")
    with pytest.raises(ValueError, match="axis_limits must be two finite numbers"):
        method_scatter(reference, test, axis_limits=(3.0, 1.0))


def test_a_group_order_keeps_each_groups_style_when_a_panel_lacks_one():
    # panels of one figure colour a group alike: the style follows the full order
    reference, test = _pairs()
    groups = np.where(np.arange(reference.size) % 2 == 0, "acute", "chronic")
    ax = bland_altman_plot(
        reference, test, groups=groups, group_order=["control", "acute", "chronic"]
    )
    acute, chronic = _by_gid(ax, "points-acute"), _by_gid(ax, "points-chronic")
    np.testing.assert_allclose(acute.get_facecolor()[0][:3], to_rgba(CATEGORICAL[1])[:3])
    np.testing.assert_allclose(chronic.get_facecolor()[0][:3], to_rgba(CATEGORICAL[2])[:3])
    assert not [a for a in ax.get_children() if a.get_gid() == "points-control"]
    assert not any(t.startswith("control") for t in _legend_texts(ax))


def test_shared_keys_name_the_lines_without_numbers():
    assert [h.get_label() for h in limit_key()] == ["no difference", "bias", "limits of agreement"]
    ratio = [h.get_label() for h in limit_key(ratio=True, bands=True, level=0.9)]
    assert ratio == ["ratio 1", "geometric mean ratio", "limits of agreement", "90% CI (shaded)"]
    regression = [h.get_label() for h in limit_key(regression=True)]
    assert regression[1] == "bias (regression on mean)"
    assert [h.get_label() for h in scatter_key(None)] == ["identity"]
    groups = group_key(["MI", "control"], {"MI": 20})
    assert [h.get_label() for h in groups] == ["MI (n = 20)", "control (n = 0)"]
    assert groups[0].get_color() == CATEGORICAL[0] and groups[1].get_marker() == "s"


def _legend_rows(legend) -> list[list[str]]:
    """The rows of a legend as drawn: legends fill column by column, and the shared key pads
    its columns to equal length."""
    texts = [t.get_text() for t in legend.get_texts()]
    nrows = len(texts) // legend._ncols
    return [texts[r::nrows] for r in range(nrows)]


@pytest.mark.parametrize("width", [7.2, 3.5, 2.0])
def test_shared_legend_fits_and_never_mixes_lines_and_groups_in_a_row(width):
    lines = limit_key(bands=True, level=0.95)
    groups = group_key([f"a long group name number {k}" for k in range(3)], {})
    names = {h.get_label() for h in lines}
    fig, _ = plt.subplots(1, 3, figsize=(width, 3.0), layout="constrained")
    legend = shared_legend(fig, lines, groups)
    assert fig.legends == [legend]
    fig.draw_without_rendering()
    if width > 2.0:  # a figure too narrow for any layout keeps the narrowest
        assert legend.get_window_extent(fig.canvas.get_renderer()).width <= fig.bbox.width
    rows = _legend_rows(legend)
    texts = [t for row in rows for t in row if t]
    assert sorted(texts) == sorted([*names, *(h.get_label() for h in groups)])
    if len(rows) > 1:  # lines and groups apart: in rows of their own, or in columns
        columns = [list(c) for c in zip(*rows, strict=True)]
        pure = [all(len({t in names for t in part if t}) <= 1 for part in parts)
                for parts in (rows, columns)]  # fmt: skip
        assert any(pure), rows


def test_shared_legend_without_entries_is_none():
    fig, _ = plt.subplots()
    assert shared_legend(fig, [], []) is None
