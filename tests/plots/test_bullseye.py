"""Tests of cohort.plots.bullseye (AHA layout drawn as patches) and cohort.plots.style.

The layout checks compare drawn patches, in display coordinates, with the bullseye of
Cerqueira MD et al., Circulation 2002;105:539-542 (Figure of the 17-segment model): basal
ring outermost, then mid and apical, apex in the centre; anterior at the top, septum on the
viewer's left, lateral on the right, inferior at the bottom; basal and mid sectors of 60
degrees, apical sectors of 90 degrees (13 top, 14 left, 15 bottom, 16 right). The expected
angles below are written from that figure, not taken from cohort.domain.segments.
"""

from __future__ import annotations

import copy
import itertools
import math
import xml.etree.ElementTree as ET

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from matplotlib.colors import Normalize, to_rgba
from PIL import Image

from cohort.plots import style
from cohort.plots.bullseye import draw_bullseye
from cohort.plots.bullseye_grid import bullseye_grid
from cohort.plots.style import (
    MISSING_COLOUR,
    OKABE_ITO,
    colour_scale,
    contrast_ratio,
    figure_size,
    relative_luminance,
    save_figure,
    style_context,
    text_colour_for,
)

# Display angle (degrees counter-clockwise from 3 o'clock, as the viewer sees it) of each
# segment's centre, read from Cerqueira et al. 2002: 1/7/13 at 12 o'clock, septum (2, 3, 8,
# 9, 14) on the left, inferior (4, 10, 15) at 6 o'clock, lateral (5, 6, 11, 12, 16) right.
CERQUEIRA_ANGLE = {
    1: 90, 2: 150, 3: 210, 4: 270, 5: 330, 6: 30,
    7: 90, 8: 150, 9: 210, 10: 270, 11: 330, 12: 30,
    13: 90, 14: 180, 15: 270, 16: 0,
}  # fmt: skip
CERQUEIRA_RING = {**dict.fromkeys(range(1, 7), "basal"), **dict.fromkeys(range(7, 13), "mid")}
CERQUEIRA_RING.update({**dict.fromkeys(range(13, 17), "apical"), 17: "apex"})
SEPTAL = (2, 3, 8, 9, 14)  # Cerqueira 2002: anteroseptal, inferoseptal, apical septal
LATERAL = (5, 6, 11, 12, 16)  # Cerqueira 2002: inferolateral, anterolateral, apical lateral


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    plt.close("all")


def _values(seed: int = 0, n: int = 17) -> dict[int, float]:
    rng = np.random.default_rng(seed)
    return {s: float(v) for s, v in zip(range(1, n + 1), rng.uniform(0, 10, n), strict=True)}


def _display_geometry(result):
    """Per segment: display angle of its centre, and min/max radius and x of its outline."""
    ax = result.ax
    ax.figure.canvas.draw()
    cx, cy = ax.transData.transform((0.0, 0.0))
    out = {}
    for number, patch in result.patches.items():
        theta = patch.get_x() + patch.get_width() / 2.0
        radius = 0.0 if number == 17 else patch.get_y() + patch.get_height() / 2.0
        x, y = ax.transData.transform((theta, radius))
        # Arcs come out as Bezier curves; to_polygons flattens them onto the circle.
        drawn = patch.get_transform().transform_path(patch.get_path())
        verts = np.vstack(drawn.to_polygons(closed_only=False))
        dist = np.hypot(verts[:, 0] - cx, verts[:, 1] - cy)
        out[number] = {
            "angle": math.degrees(math.atan2(y - cy, x - cx)) % 360.0,
            "r_min": dist.min(),
            "r_max": dist.max(),
            "x_min": verts[:, 0].min() - cx,
            "x_max": verts[:, 0].max() - cx,
            "y_min": verts[:, 1].min() - cy,
            "y_max": verts[:, 1].max() - cy,
        }
    return out


def _angle_gap(a: float, b: float) -> float:
    return abs((a - b + 180.0) % 360.0 - 180.0)


# --- layout against Cerqueira et al. 2002 -------------------------------------------------


def test_segment_centres_at_the_standard_clock_positions():
    # Cerqueira 2002 bullseye: segment angles as in CERQUEIRA_ANGLE (display coordinates).
    geometry = _display_geometry(draw_bullseye(_values(), colorbar=False))
    for number, expected in CERQUEIRA_ANGLE.items():
        assert _angle_gap(geometry[number]["angle"], expected) < 0.5, number


def test_layout_holds_even_if_the_axes_had_other_polar_conventions():
    # The function must set zero location and direction itself (not rely on defaults).
    fig = plt.figure()
    ax = fig.add_subplot(projection="polar")
    ax.set_theta_zero_location("N")
    ax.set_theta_direction(-1)
    result = draw_bullseye(_values(), ax=ax, colorbar=False)
    geometry = _display_geometry(result)
    for number, expected in CERQUEIRA_ANGLE.items():
        assert _angle_gap(geometry[number]["angle"], expected) < 0.5, number
    assert ax.get_theta_direction() == 1
    assert ax.get_theta_offset() == pytest.approx(0.0)


def test_septal_segments_left_lateral_right_anterior_top():
    # Cerqueira 2002: septum on the viewer's left, lateral wall on the right, anterior top.
    geometry = _display_geometry(draw_bullseye(_values(), colorbar=False))
    tol = 1.0  # display pixels: the outline touches the vertical diameter
    for number in SEPTAL:
        assert geometry[number]["x_max"] <= tol, number
    for number in LATERAL:
        assert geometry[number]["x_min"] >= -tol, number
    for number in (1, 7, 13):
        assert geometry[number]["y_min"] > 0, number
    for number in (4, 10, 15):
        assert geometry[number]["y_max"] < 0, number


def test_rings_from_basal_outside_to_apex_in_the_centre():
    # Cerqueira 2002: basal ring outermost, then mid, apical, apex as the central disc.
    geometry = _display_geometry(draw_bullseye(_values(), colorbar=False))
    order = ("basal", "mid", "apical", "apex")
    band = {
        ring: (
            min(g["r_min"] for n, g in geometry.items() if CERQUEIRA_RING[n] == ring),
            max(g["r_max"] for n, g in geometry.items() if CERQUEIRA_RING[n] == ring),
        )
        for ring in order
    }
    for outer, inner in itertools.pairwise(order):
        assert band[outer][0] == pytest.approx(band[inner][1], abs=1.0)
        assert band[outer][0] > band[inner][0]
    assert band["apex"][0] == pytest.approx(0.0, abs=1.0)


def test_sector_widths_and_full_coverage():
    # Cerqueira 2002: six 60-degree sectors in the basal and mid rings, four of 90 apically.
    result = draw_bullseye(_values(), colorbar=False)
    widths = {n: math.degrees(p.get_width()) for n, p in result.patches.items()}
    for n in range(1, 13):
        assert widths[n] == pytest.approx(60.0)
    for n in range(13, 17):
        assert widths[n] == pytest.approx(90.0)
    assert widths[17] == pytest.approx(360.0)
    for ring in ((1, 7), (7, 13), (13, 17)):
        assert sum(widths[n] for n in range(*ring)) == pytest.approx(360.0)


def test_every_patch_knows_its_segment():
    result = draw_bullseye(_values(), colorbar=False)
    assert sorted(result.patches) == list(range(1, 18))
    for number, patch in result.patches.items():
        assert patch.get_gid() == f"segment-{number}"
    bars = [p for p in result.ax.patches if (p.get_gid() or "").startswith("segment-")]
    assert len(bars) == 17  # one bar per segment


def test_sixteen_segment_model_has_no_apex():
    # 16-segment variant: the 17-segment model without the apex (Cerqueira 2002; DOMAIN.md).
    result = draw_bullseye(_values(n=16), model="aha16", colorbar=False)
    assert sorted(result.patches) == list(range(1, 17))
    geometry = _display_geometry(result)
    apical_inner = min(geometry[n]["r_min"] for n in range(13, 17))
    assert apical_inner > 10.0  # the centre disc stays empty
    with pytest.raises(ValueError, match="segment 17, which is not in model 'aha16'"):
        draw_bullseye({17: 1.0}, model="aha16")


# --- colours, missing segments, outlines, labels -------------------------------------------


def test_patch_colours_equal_the_colour_map_at_the_value():
    values = _values(3)
    result = draw_bullseye(values, cmap="viridis", vmin=0.0, vmax=10.0)
    norm = Normalize(0.0, 10.0)
    for number, value in values.items():
        expected = matplotlib.colormaps["viridis"](norm(value))
        np.testing.assert_allclose(result.patches[number].get_facecolor(), expected, atol=1e-9)


def test_default_value_limits_span_the_data():
    values = {1: 2.0, 2: 8.0, 3: 5.0}
    result = draw_bullseye(values, colorbar=False)
    cmap = matplotlib.colormaps[style.SEQUENTIAL_CMAP]
    np.testing.assert_allclose(result.patches[1].get_facecolor(), cmap(0.0))
    np.testing.assert_allclose(result.patches[2].get_facecolor(), cmap(1.0))
    assert result.mappable.norm.vmin == 2.0 and result.mappable.norm.vmax == 8.0


def test_difference_scale_is_symmetric_about_zero():
    # Common practice: a diverging map with zero at its neutral midpoint.
    values = {1: -2.0, 2: 5.0, 3: 0.0}
    result = draw_bullseye(values, kind="difference", cmap="RdBu_r", colorbar=False)
    cmap = matplotlib.colormaps["RdBu_r"]
    np.testing.assert_allclose(result.patches[3].get_facecolor(), cmap(0.5))
    np.testing.assert_allclose(result.patches[2].get_facecolor(), cmap(1.0))
    np.testing.assert_allclose(result.patches[1].get_facecolor(), cmap(0.5 - 2.0 / 10.0))
    assert result.mappable.norm.vmin == -5.0 and result.mappable.norm.vmax == 5.0


def test_asymmetric_difference_limits_keep_zero_at_the_midpoint():
    scale = colour_scale("difference", [-1.0, 4.0], vmin=-2.0, vmax=8.0)
    assert float(scale.norm(0.0)) == pytest.approx(0.5)
    with pytest.raises(ValueError, match="straddle zero"):
        colour_scale("difference", [1.0], vmin=1.0, vmax=3.0)


def test_prevalence_scale_is_discrete_in_ten_percent_bins():
    result = draw_bullseye({1: 15.0, 2: 19.0, 3: 21.0, 4: 0.0, 5: 100.0}, kind="prevalence")
    colour = {n: tuple(p.get_facecolor()) for n, p in result.patches.items()}
    assert colour[1] == colour[2]
    assert colour[2] != colour[3]
    assert colour[4] != colour[5]
    with pytest.raises(ValueError, match="percentages in 0-100"):
        draw_bullseye({1: 120.0}, kind="prevalence")


def test_clipped_limits_are_flagged_on_the_colour_bar():
    result = draw_bullseye({1: -1.0, 2: 5.0, 3: 12.0}, vmin=0.0, vmax=10.0)
    assert result.colorbar is not None
    assert result.colorbar.extend == "both"


def test_missing_segments_are_hatched_grey_with_a_key():
    values = _values()
    del values[4]
    values[11] = math.nan
    result = draw_bullseye(values)
    assert result.missing == (4, 11)
    for number in (4, 11):
        patch = result.patches[number]
        assert patch.get_hatch()
        np.testing.assert_allclose(patch.get_facecolor(), to_rgba(MISSING_COLOUR))
    assert not result.patches[1].get_hatch()
    legend = result.ax.get_legend()
    assert [t.get_text() for t in legend.get_texts()] == ["no data"]


def test_outlined_segments_have_a_thick_outline():
    result = draw_bullseye(_values(), outline=[2, 8, 17], colorbar=False)
    plain = result.patches[1].get_linewidth()
    for number in (2, 8):
        artist = result.outlines[number]
        assert artist is result.patches[number]
        assert artist.get_linewidth() >= 2.0 * plain
        np.testing.assert_allclose(artist.get_edgecolor(), to_rgba("black"))
    apex = result.outlines[17]  # a circle at the apex's outer radius (no radial seam)
    assert apex.get_linewidth() >= 2.0 * plain
    np.testing.assert_allclose(apex.get_ydata(), result.patches[17].get_height())
    assert result.patches[17].get_linewidth() == 0.0
    with pytest.raises(ValueError, match="outline names segment 18"):
        draw_bullseye(_values(), outline=[18])


def test_label_text_contrasts_with_the_fill():
    # viridis runs from dark purple (0) to light yellow (1): white text on the dark end,
    # black on the light end (WCAG 2.1 contrast ratio).
    result = draw_bullseye({1: 0.0, 2: 10.0}, cmap="viridis", vmin=0.0, vmax=10.0)
    assert result.labels[1].get_color() == "#FFFFFF"
    assert result.labels[2].get_color() == "#000000"
    for number in (1, 2):
        fill = result.patches[number].get_facecolor()
        assert contrast_ratio(result.labels[number].get_color(), fill) >= 4.5


def test_labels_and_annotations_sit_on_their_segment():
    notes = {2: "n=12", 17: "p=0.03"}
    result = draw_bullseye(_values(), labels="short", annotations=notes, colorbar=False)
    assert result.labels[2].get_text() == "bAS"  # basal anteroseptal (Cerqueira 2002)
    assert result.labels[14].get_text() == "aS"  # apical septal
    assert result.annotations[2].get_text() == "n=12"
    theta, radius = result.annotations[2].xy
    patch = result.patches[2]
    assert patch.get_x() <= theta <= patch.get_x() + patch.get_width()
    assert patch.get_y() <= radius <= patch.get_y() + patch.get_height()
    assert result.annotations[17].xy == (pytest.approx(0.0), pytest.approx(0.0))
    assert draw_bullseye(_values(), labels=None, colorbar=False).labels == {}


def test_input_errors_name_the_argument():
    with pytest.raises(ValueError, match="kind must be one of"):
        draw_bullseye(_values(), kind="ratio")
    with pytest.raises(ValueError, match="labels must be one of"):
        draw_bullseye(_values(), labels="names")
    with pytest.raises(ValueError, match="must be segment numbers"):
        draw_bullseye({"basal": 1.0})
    with pytest.raises(ValueError, match="must be numbers"):
        draw_bullseye({1: "high"})
    _fig, ax = plt.subplots()
    with pytest.raises(ValueError, match="ax must be a polar Axes"):
        draw_bullseye(_values(), ax=ax)
    with pytest.raises(ValueError, match="either norm or vmin/vmax"):
        draw_bullseye(_values(), norm=Normalize(0, 1), vmin=0.0)


def test_bullseye_leaves_its_input_unchanged():
    values = _values()
    values[5] = math.nan
    series = pd.Series(values)
    before_dict, before_series = copy.deepcopy(values), series.copy()
    draw_bullseye(values, outline=(1,))
    draw_bullseye(series)
    assert values.keys() == before_dict.keys()
    assert all(
        (math.isnan(a) and math.isnan(before_dict[k])) or a == before_dict[k]
        for k, a in values.items()
    )
    pd.testing.assert_series_equal(series, before_series)


# --- small multiples -------------------------------------------------------------------------


def _tidy(groups=("control", "MI"), methods=("ref", "fast"), seed=1) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rows = [
        {"group": g, "method": m, "segment": s, "value": float(rng.uniform(0, 10))}
        for g in groups
        for m in methods
        for s in range(1, 18)
    ]
    return pd.DataFrame(rows)


def test_grid_shares_one_colour_scale_and_one_colour_bar():
    table = _tidy()
    grid = bullseye_grid(table, parameter="ff")
    assert len(grid.panels) == 4
    lo, hi = table["value"].min(), table["value"].max()
    for panel in grid.panels.values():
        assert panel.mappable.norm.vmin == pytest.approx(lo)
        assert panel.mappable.norm.vmax == pytest.approx(hi)
        assert panel.colorbar is None
    assert grid.colorbar is not None
    assert grid.colorbar.ax.get_ylabel() == "fat fraction (%)"  # PARAMETERS["ff"].axis_label
    # The same value gets the same colour in every panel.
    mapped = grid.mappable.to_rgba(5.0)
    np.testing.assert_allclose(grid.panels[("MI", "fast")].mappable.to_rgba(5.0), mapped)
    titles = [ax.get_title() for ax in grid.axes[0]]
    assert titles == ["ref", "fast"]
    assert [row[0].get_ylabel() for row in grid.axes] == ["control", "MI"]


def test_grid_panel_colours_match_the_table():
    table = _tidy()
    grid = bullseye_grid(table, cmap="viridis", vmin=0.0, vmax=10.0)
    row = table.iloc[20]
    patch = grid.panels[(row["group"], row["method"])].patches[int(row["segment"])]
    expected = matplotlib.colormaps["viridis"](Normalize(0.0, 10.0)(row["value"]))
    np.testing.assert_allclose(patch.get_facecolor(), expected)


def test_grid_per_panel_limits_and_subject_wrap():
    rng = np.random.default_rng(2)
    table = pd.DataFrame(
        [
            {"subject": f"S{k}", "segment": s, "value": float(rng.normal(25 + 10 * k, 2))}
            for k in range(5)
            for s in range(1, 18)
        ]
    )
    grid = bullseye_grid(table, row=None, col="subject", col_wrap=3, shared=False)
    assert len(grid.axes) == 2 and len(grid.axes[0]) == 3
    assert not grid.axes[1][2].get_visible()  # 5 panels in a 2 x 3 grid
    assert grid.colorbar is None
    vmins = [p.mappable.norm.vmin for p in grid.panels.values()]
    assert len(set(vmins)) == 5  # each panel its own limits
    assert all(p.colorbar is not None for p in grid.panels.values())


def test_grid_outline_and_annotation_columns():
    table = _tidy(groups=("MI",), methods=("ref",))
    table["positive"] = table["segment"].isin([3, 9])
    table["n"] = [f"{k}/20" for k in range(17)]
    grid = bullseye_grid(table, outline="positive", annotation="n")
    panel = grid.panels[("MI", "ref")]
    assert sorted(panel.outlines) == [3, 9]
    assert panel.annotations[1].get_text() == "0/20"


def test_grid_draws_one_key_for_the_figure():
    table = _tidy()
    table = table[~((table["method"] == "fast") & (table["segment"] == 17))].copy()
    table["positive"] = table["segment"] == 2
    grid = bullseye_grid(table, outline="positive", outline_label="hemorrhage")
    assert all(p.ax.get_legend() is None for p in grid.panels.values())
    assert grid.panels[("MI", "fast")].missing == (17,)
    (key,) = grid.fig.legends
    assert [t.get_text() for t in key.get_texts()] == ["no data", "hemorrhage"]


def test_single_bullseye_key_explains_the_outline():
    result = draw_bullseye(_values(), outline=[5], outline_label="fat", colorbar=False)
    assert [t.get_text() for t in result.ax.get_legend().get_texts()] == ["fat"]
    unexplained = draw_bullseye(_values(), outline=[5], colorbar=False)
    assert unexplained.ax.get_legend() is None
    hidden = draw_bullseye({1: 1.0}, key=False, colorbar=False)
    assert hidden.missing and hidden.ax.get_legend() is None


def test_grid_rejects_unaggregated_tables_and_unknown_columns():
    table = pd.concat([_tidy(), _tidy().iloc[:3]])
    with pytest.raises(ValueError, match=r"one row per .* \(aggregate first\), got 3"):
        bullseye_grid(table)
    with pytest.raises(ValueError, match="no column"):
        bullseye_grid(_tidy(), row="finding")
    with pytest.raises(ValueError, match="col_wrap needs row=None"):
        bullseye_grid(_tidy(), col_wrap=2)


def test_grid_leaves_its_table_unchanged():
    table = _tidy()
    table.loc[3, "value"] = np.nan
    before = table.copy(deep=True)
    digest = pd.util.hash_pandas_object(table, index=True).to_numpy().copy()
    bullseye_grid(table)
    pd.testing.assert_frame_equal(table, before)
    np.testing.assert_array_equal(pd.util.hash_pandas_object(table, index=True), digest)


# --- files -----------------------------------------------------------------------------------


def test_bullseye_and_grid_write_png_and_svg(tmp_path):
    result = draw_bullseye(_values(), parameter="r2star", outline=(3,), title="R2*")
    paths = save_figure(result.ax.figure, tmp_path / "fig" / "bullseye")
    assert [p.suffix for p in paths] == [".png", ".svg"]
    png, svg = paths
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    width_in, height_in = result.ax.figure.get_size_inches()
    with Image.open(png) as image:  # 300 dpi at the figure's print size
        assert image.size[0] == pytest.approx(width_in * 300, abs=1)
        assert image.size[1] == pytest.approx(height_in * 300, abs=1)
        assert image.info["dpi"] == pytest.approx((300, 300), abs=0.5)
    root = ET.parse(svg).getroot()
    assert root.tag.endswith("svg")
    ids = {el.get("id") for el in root.iter()}
    assert {f"segment-{n}" for n in range(1, 18)} <= ids
    svg_text = svg.read_text(encoding="utf-8")
    assert "<text" in svg_text  # text kept as text, editable
    assert "font-family: 'Arial'" in svg_text
    grid = bullseye_grid(_tidy(), kind="difference", parameter="field")
    for path in save_figure(grid.fig, tmp_path / "grid", dpi=100):
        assert path.stat().st_size > 1000


def test_save_figure_is_reproducible_and_checks_its_arguments(tmp_path):
    fig = draw_bullseye(_values(), colorbar=False).ax.figure
    (first,) = save_figure(fig, tmp_path / "a", formats=("svg",))
    (second,) = save_figure(fig, tmp_path / "b", formats=("svg",))
    assert first.read_bytes() == second.read_bytes()  # no date, fixed hash salt
    with pytest.raises(ValueError, match="formats must be among"):
        save_figure(fig, tmp_path / "c", formats=("png", "bmpx"))
    with pytest.raises(ValueError, match="sequence of format names"):
        save_figure(fig, tmp_path / "c", formats="png")
    with pytest.raises(ValueError, match="dpi must be a positive number"):
        save_figure(fig, tmp_path / "c", dpi=0)


# --- style -----------------------------------------------------------------------------------


def test_okabe_ito_palette_values():
    # Wong B. Nature Methods 2011;8:441, Figure 2, RGB 0-255 (memory).
    expected = {
        "black": (0, 0, 0),
        "orange": (230, 159, 0),
        "sky blue": (86, 180, 233),
        "bluish green": (0, 158, 115),
        "yellow": (240, 228, 66),
        "blue": (0, 114, 178),
        "vermillion": (213, 94, 0),
        "reddish purple": (204, 121, 167),
    }
    for name, rgb in expected.items():
        got = tuple(round(c * 255) for c in matplotlib.colors.to_rgb(OKABE_ITO[name]))
        assert got == rgb, name
    assert len(set(style.CATEGORICAL)) == 8 and len(set(style.MARKERS)) == 8


def test_relative_luminance_and_contrast_follow_wcag():
    # W3C WCAG 2.1 (2018), definitions of relative luminance and contrast ratio.
    assert relative_luminance("#FFFFFF") == pytest.approx(1.0)
    assert relative_luminance("#000000") == pytest.approx(0.0)
    assert relative_luminance("#FF0000") == pytest.approx(0.2126)
    assert relative_luminance("#00FF00") == pytest.approx(0.7152)
    assert relative_luminance("#0000FF") == pytest.approx(0.0722)
    assert contrast_ratio("#000000", "#FFFFFF") == pytest.approx(21.0)
    # Grey #767676 on white is 4.54:1, the lightest grey passing AA (WebAIM, memory).
    assert contrast_ratio("#767676", "#FFFFFF") == pytest.approx(4.54, abs=0.01)


@settings(max_examples=200, deadline=None)
@given(st.tuples(*(st.integers(0, 255),) * 3))
def test_chosen_text_colour_always_meets_wcag_aa(rgb):
    # Black or white on any fill reaches at least sqrt(21) ~ 4.58:1, above the 4.5:1 of
    # WCAG 2.1 success criterion 1.4.3 (AA, normal text), if the better one is chosen.
    fill = "#{:02X}{:02X}{:02X}".format(*rgb)
    chosen = text_colour_for(fill)
    other = "#FFFFFF" if chosen == "#000000" else "#000000"
    assert contrast_ratio(chosen, fill) >= 4.5
    assert contrast_ratio(chosen, fill) >= contrast_ratio(other, fill)


def test_style_context_does_not_leak_and_sizes_follow_journal_widths():
    before = dict(matplotlib.rcParams)
    with style_context():
        assert matplotlib.rcParams["font.size"] == 7.0
        assert 7.0 <= matplotlib.rcParams["axes.titlesize"] <= 9.0
    assert dict(matplotlib.rcParams) == before
    # Single 89 mm, 1.5 column 120 mm, double 183 mm (Nature-family widths, memory).
    assert figure_size("single")[0] * 25.4 == pytest.approx(89.0)
    assert figure_size("onehalf")[0] * 25.4 == pytest.approx(120.0)
    assert figure_size("double", aspect=0.5) == pytest.approx((183 / 25.4, 183 / 25.4 / 2))
    with pytest.raises(ValueError, match="width must be one of"):
        figure_size("triple")
