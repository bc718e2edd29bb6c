"""Tests of the figures with one panel per test method: Bland-Altman plots and method
comparisons (cohort.figures.agreement), median-difference maps (cohort.figures.maps),
paired subject means (cohort.figures.groups), their panel layout (cohort.figures.layout)
and captions (cohort.figures.captions).

The study is the invented demo cohort (12 subjects) with two invented test methods added:
"b" = quickmap + noise, "c" = 1.04 x reference + noise. The agreement rows are fakes with
the documented columns, their numbers computed here with numpy (mean and SD of the
differences, Bland & Altman 1986, Lancet), so each drawn number is checked against a value
formed independently of the package. The drawn artists are inspected, not only the files.
"""

from __future__ import annotations

import math
import warnings

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg

from cohort.demo import write_demo
from cohort.figures import agreement as agreement_figures
from cohort.figures import groups as group_figures
from cohort.figures import maps as map_figures
from cohort.figures.layout import MAX_PANELS_PER_ROW, _letter, _panel_grid
from cohort.figures.records import SkippedFigure
from cohort.io.study import load_study
from cohort.plots.style import FIGURE_WIDTHS_MM, MM_PER_INCH, style_context

REFERENCE = "reference-fit"
ORDER = ("quickmap", "c", "b")  # first appearance in the values table: not alphabetical

STUDY_TOML = """
[study]
title = "Invented study with three test methods"
values = "values.csv"
subjects = "subjects.csv"
reference = "reference-fit"
segment_model = "aha17"
groups = ["control", "acute", "chronic"]

[study.group_labels]
control = "Healthy volunteers"
acute = "Acute infarction"
chronic = "Chronic infarction"

[units]
ff = "percent"
field = "Hz"

[field]
referencing = "subject-median"
"""


def _write_study(folder, methods: tuple[str, ...]):
    """The demo's reference and quickmap values plus the invented methods, in this order."""
    write_demo(folder, n_subjects=12)
    values = pd.read_csv(folder / "values.csv")
    reference = values[values["method"] == REFERENCE]
    quick = values[values["method"] == "quickmap"]
    rng = np.random.default_rng(11)
    made = {
        "quickmap": quick,
        "b": quick.assign(method="b", value=(quick["value"] + rng.normal(0, 0.3, len(quick)))),
        "c": reference.assign(
            method="c", value=reference["value"] * 1.04 + rng.normal(0, 0.3, len(reference))
        ),
    }
    parts = [reference, *(made[m] for m in methods)]
    pd.concat(parts).round({"value": 3}).to_csv(folder / "values.csv", index=False)
    (folder / "study.toml").write_text(STUDY_TOML, encoding="utf-8")
    return load_study(folder / "study.toml")


@pytest.fixture(scope="module")
def three(tmp_path_factory):
    return _write_study(tmp_path_factory.mktemp("three"), ORDER)


@pytest.fixture(scope="module")
def one(tmp_path_factory):
    return _write_study(tmp_path_factory.mktemp("one"), ("quickmap",))


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    plt.close("all")


def fake_agreement(study) -> pd.DataFrame:
    """Stratum "all" rows: bias and 1.96 SD limits of the differences (Bland & Altman 1986),
    invented CIs around them, a Passing-Bablok line and CCC as given numbers."""
    rows = []
    for (parameter, method), part in study.paired.groupby(["parameter", "method"], observed=True):
        d = (part["test_value"] - part["reference_value"]).to_numpy()
        bias, sd = float(np.mean(d)), float(np.std(d, ddof=1))
        row = {
            "parameter": parameter, "method": method, "reference": study.reference,
            "stratum": "all", "n_subjects": part["subject"].nunique(), "n_pairs": len(part),
            "bias": bias, "bias_ci_low": bias - 0.1 * sd, "bias_ci_high": bias + 0.1 * sd,
            "loa_low": bias - 1.96 * sd, "loa_high": bias + 1.96 * sd,
            "loa_low_ci_low": bias - 2.2 * sd, "loa_low_ci_high": bias - 1.8 * sd,
            "loa_high_ci_low": bias + 1.8 * sd, "loa_high_ci_high": bias + 2.2 * sd,
            "ccc": 0.9, "ccc_ci_low": 0.85, "ccc_ci_high": 0.95,
            "pb_slope": 1.0 + 0.01 * len(rows), "pb_intercept": -0.1,
            "confidence_level": 0.95, "ci_method": "invented intervals of the test",
        }  # fmt: skip
        ratio = sd_log = math.nan
        if parameter == "r2star":
            log_ratio = np.log(part["test_value"] / part["reference_value"]).to_numpy()
            ratio, sd_log = float(np.exp(np.mean(log_ratio))), float(np.std(log_ratio, ddof=1))
        row.update(
            ratio_bias=ratio,
            ratio_loa_low=ratio * math.exp(-1.96 * sd_log),
            ratio_loa_high=ratio * math.exp(1.96 * sd_log),
        )
        rows.append(row)
    return pd.DataFrame(rows)


def _drawn(study, table=None):
    table = fake_agreement(study) if table is None else table
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # consistent inputs: no warning expected
        items = list(agreement_figures._agreement_figures(study, {"agreement": table}))
    return {item.key: item for item in items}, table


@pytest.fixture(scope="module")
def drawn_three(three):
    return _drawn(three)


def _panels(fig):
    return [ax for ax in fig.axes if ax.get_visible()]


def _row(table, parameter, method):
    return table[(table["parameter"] == parameter) & (table["method"] == method)].iloc[0]


def _by_gid(ax, gid):
    found = [a for a in ax.get_children() if a.get_gid() == gid]
    assert len(found) == 1, (gid, found)
    return found[0]


def _points(ax) -> np.ndarray:
    """Every point drawn in a panel (all groups), sorted by x then y."""
    offsets = np.concatenate(
        [c.get_offsets() for c in ax.collections if str(c.get_gid()).startswith("points")]
    )
    return offsets[np.lexsort((offsets[:, 1], offsets[:, 0]))]


def _sorted(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    pairs = np.column_stack([x, y])
    return pairs[np.lexsort((pairs[:, 1], pairs[:, 0]))]


# --- one figure per parameter, one panel per method ------------------------------------------


def test_one_figure_per_parameter_whatever_the_number_of_methods(drawn_three, one):
    keys = set(drawn_three[0])
    assert keys == {
        "bland_altman_ff", "bland_altman_r2star", "bland_altman_field",
        "bland_altman_ratio_r2star", "scatter_ff", "scatter_r2star", "scatter_field",
    }  # fmt: skip
    assert set(_drawn(one)[0]) == keys  # the same set with one test method


def test_panels_follow_the_study_order_with_letters(drawn_three, three):
    assert three.test_methods == ORDER
    for key, item in drawn_three[0].items():
        panels = _panels(item.fig)
        assert [ax.get_title() for ax in panels] == list(ORDER), key
        assert [ax.get_title(loc="left") for ax in panels] == ["a", "b", "c"], key
        assert item.method is None  # a figure of several methods
        assert "a, quickmap; b, c; c, b" in item.caption, key


def test_bland_altman_panels_draw_each_methods_row_and_pairs(drawn_three, three):
    items, table = drawn_three
    for parameter in ("ff", "r2star", "field"):
        panels = _panels(items[f"bland_altman_{parameter}"].fig)
        for ax, method in zip(panels, ORDER, strict=True):
            row = _row(table, parameter, method)
            for name in ("bias", "loa_low", "loa_high"):
                assert _by_gid(ax, name).get_ydata()[0] == pytest.approx(row[name])
                band = _by_gid(ax, f"{name}-ci")
                assert band.get_y() == pytest.approx(row[f"{name}_ci_low"])
                assert band.get_y() + band.get_height() == pytest.approx(row[f"{name}_ci_high"])
            pairs = three.paired[
                (three.paired["parameter"] == parameter) & (three.paired["method"] == method)
            ]
            ref, test = pairs["reference_value"].to_numpy(), pairs["test_value"].to_numpy()
            # Bland & Altman 1986: x = mean of the two methods, y = test - reference
            np.testing.assert_allclose(_points(ax), _sorted((ref + test) / 2, test - ref))


def test_ratio_panels_draw_the_ratio_columns(drawn_three):
    items, table = drawn_three
    panels = _panels(items["bland_altman_ratio_r2star"].fig)
    for ax, method in zip(panels, ORDER, strict=True):
        row = _row(table, "r2star", method)
        assert ax.get_yscale() == "log"
        assert _by_gid(ax, "bias").get_ydata()[0] == pytest.approx(row["ratio_bias"])
        assert _by_gid(ax, "loa_high").get_ydata()[0] == pytest.approx(row["ratio_loa_high"])


def test_scatter_panels_draw_each_methods_line_and_ccc(drawn_three, three):
    items, table = drawn_three
    for parameter in ("ff", "r2star", "field"):
        panels = _panels(items[f"scatter_{parameter}"].fig)
        for ax, method in zip(panels, ORDER, strict=True):
            row = _row(table, parameter, method)
            fit = _by_gid(ax, "fit")
            assert fit.get_slope() == pytest.approx(row["pb_slope"])
            assert fit.get_xy1() == pytest.approx((0.0, row["pb_intercept"]))
            numbers = _by_gid(ax, "numbers").get_text()
            assert "CCC = 0.900 (0.850 to 0.950)" in numbers
            assert f"y = {row['pb_slope']:.3f} x" in numbers
            pairs = three.paired[
                (three.paired["parameter"] == parameter) & (three.paired["method"] == method)
            ]
            expected = _sorted(pairs["reference_value"].to_numpy(), pairs["test_value"].to_numpy())
            np.testing.assert_allclose(_points(ax), expected)  # x = reference, y = test
            assert ax.get_xlim() == pytest.approx(ax.get_ylim())  # identity is the diagonal


def test_panels_share_both_axes(drawn_three):
    for key, item in drawn_three[0].items():
        first, *others = _panels(item.fig)
        for ax in others:
            assert first.get_shared_x_axes().joined(first, ax), key
            assert first.get_shared_y_axes().joined(first, ax), key
            assert ax.get_xlim() == first.get_xlim() and ax.get_ylim() == first.get_ylim()


def test_one_legend_per_figure_never_per_panel(drawn_three):
    for key, item in drawn_three[0].items():
        fig = item.fig
        assert len(fig.legends) == 1, key
        assert all(ax.get_legend() is None for ax in fig.axes), key
        texts = [t.get_text() for t in fig.legends[0].get_texts()]
        for group in ("Healthy volunteers", "Acute infarction", "Chronic infarction"):
            assert any(t.startswith(group) for t in texts), (key, texts)


def test_numbers_above_each_panel_use_one_precision(drawn_three):
    items, table = drawn_three
    panels = _panels(items["bland_altman_ff"].fig)
    texts = [_by_gid(ax, "numbers").get_text() for ax in panels]
    decimals = {len(t.split("\n")[0].split()[1].split(".")[1]) for t in texts}
    assert len(decimals) == 1  # the same number of decimals in every panel
    (n,) = decimals
    for text, method in zip(texts, ORDER, strict=True):
        bias = _row(table, "ff", method)["bias"]
        assert text.startswith(f"bias {bias:.{n}f}".replace("-", "\N{MINUS SIGN}"))


def test_group_colours_are_the_same_in_every_panel(drawn_three):
    panels = _panels(drawn_three[0]["bland_altman_ff"].fig)
    colours = [
        {
            c.get_gid(): tuple(np.round(c.get_facecolor()[0][:3], 6))
            for c in ax.collections
            if str(c.get_gid()).startswith("points-")
        }
        for ax in panels
    ]
    assert len(colours[0]) == 3 and all(c == colours[0] for c in colours)


def test_text_and_legend_stay_inside_the_figure(drawn_three):
    for key, item in drawn_three[0].items():
        fig = item.fig
        renderer = FigureCanvasAgg(fig).get_renderer()  # a canvas again, the figure closed
        fig.draw_without_rendering()
        box = fig.legends[0].get_window_extent(renderer)
        assert box.x0 >= fig.bbox.x0 - 1 and box.x1 <= fig.bbox.x1 + 1, key
        for ax in _panels(fig):
            numbers = _by_gid(ax, "numbers").get_window_extent(renderer)
            title = ax.title.get_window_extent(renderer)
            assert numbers.y1 <= title.y0 + 0.5, key  # the title sits above the numbers
            assert numbers.y0 >= ax.get_window_extent(renderer).y1, key  # not over the data


def test_captions_give_each_panels_numbers_and_how_intervals_were_obtained(drawn_three, three):
    items, table = drawn_three
    caption = items["bland_altman_ff"].caption
    for letter, method in zip("abc", ORDER, strict=True):
        pairs = three.paired[
            (three.paired["parameter"] == "ff") & (three.paired["method"] == method)
        ]
        lead = f"{letter}, {method}: {len(pairs)} (subject, segment) pairs from "
        assert lead + f"{pairs['subject'].nunique()} subjects" in caption
        row = _row(table, "ff", method)
        # three significant digits with a true minus sign (hand formatting)
        bias = f"{row['bias']:#.3g}".replace("-", "\N{MINUS SIGN}")
        assert f"bias {bias} %" in caption
        low = f"{row['bias_ci_low']:#.3g}".replace("-", "\N{MINUS SIGN}")
        assert f"(95% CI {low} to " in caption
    assert "Bland & Altman 2007" in caption and "1.96 SD" in caption
    assert "Shaded bands: 95% CIs of these lines (invented intervals of the test)" in caption
    scatter = items["scatter_r2star"].caption
    assert "Passing & Bablok 1983" in scatter and "Lin 1989" in scatter
    assert scatter.count("CCC 0.900 (95% CI 0.850 to 0.950)") == 3


def test_one_method_is_one_panel_without_a_letter(one):
    items, table = _drawn(one)
    for key, item in items.items():
        (ax,) = _panels(item.fig)
        assert ax.get_title() == "quickmap" and ax.get_title(loc="left") == "", key
        assert item.method == "quickmap", key
        width_mm = item.fig.get_figwidth() * MM_PER_INCH
        assert width_mm == pytest.approx(FIGURE_WIDTHS_MM["single"]), key
        assert "a, quickmap" not in item.caption, key
    ax = _panels(items["bland_altman_ff"].fig)[0]
    assert _by_gid(ax, "bias").get_ydata()[0] == pytest.approx(
        _row(table, "ff", "quickmap")["bias"]
    )
    assert ax.get_ylabel().startswith("quickmap")  # the method named on its own axis


def test_a_method_without_a_row_is_named_in_the_caption(three):
    table = fake_agreement(three)
    table = table[~((table["parameter"] == "ff") & (table["method"] == "c"))]
    items, _ = _drawn(three, table)
    item = items["bland_altman_ff"]
    assert [ax.get_title() for ax in _panels(item.fig)] == ["quickmap", "b"]
    assert "Not drawn: the agreement table has no 'all' row for ff / 'c'." in item.caption


def test_regression_based_limits_are_drawn_and_said_per_panel(three):
    # Bland & Altman 1999: a line a + b x mean for the bias and each limit; invented numbers
    table = fake_agreement(three)
    chosen = (table["parameter"] == "r2star") & (table["method"] == "c")
    lines = {"bias": (2.0, -0.1), "loa_low": (-5.0, -0.2), "loa_high": (8.0, 0.02)}
    for name, (a, b) in lines.items():
        table.loc[chosen, f"{name}_intercept"], table.loc[chosen, f"{name}_slope"] = a, b
    items, _ = _drawn(three, table)
    item = items["bland_altman_r2star"]
    panels = dict(zip(ORDER, _panels(item.fig), strict=True))
    line = _by_gid(panels["c"], "bias-regression")
    np.testing.assert_allclose(line.get_ydata(), 2.0 - 0.1 * line.get_xdata())
    assert not [a for a in panels["quickmap"].get_children() if a.get_gid() == "bias-regression"]
    assert "bias 2.00 \N{MINUS SIGN} 0.100 \N{MULTIPLICATION SIGN} mean 1/s" in item.caption
    assert "regression-based, Bland & Altman 1999" in item.caption


def test_a_method_without_ratio_limits_is_left_out_of_the_ratio_figure(three):
    table = fake_agreement(three)
    table.loc[(table["parameter"] == "r2star") & (table["method"] == "b"), "ratio_bias"] = np.nan
    items, _ = _drawn(three, table)
    item = items["bland_altman_ratio_r2star"]
    assert [ax.get_title() for ax in _panels(item.fig)] == ["quickmap", "c"]
    assert "Not drawn: no ratio-scale limits for 'b' in the agreement table." in item.caption


def test_absent_table_skips_one_figure_per_parameter(three):
    items = list(agreement_figures._agreement_figures(three, {}))
    assert all(isinstance(i, SkippedFigure) for i in items)
    assert sorted(i.key for i in items) == sorted(
        f"{kind}_{p}" for kind in ("bland_altman", "scatter") for p in ("ff", "r2star", "field")
    )


def test_two_rows_for_one_method_are_an_error(three):
    table = fake_agreement(three)
    with pytest.raises(ValueError, match=r"one stratum 'all' row per \(parameter, method\)"):
        list(agreement_figures._agreement_figures(three, {"agreement": pd.concat([table, table])}))


# --- layout ------------------------------------------------------------------------------------


def test_panels_wrap_after_four_to_a_row():
    assert MAX_PANELS_PER_ROW == 4
    with style_context():
        fig, axes = _panel_grid([5], aspect=0.8)
    assert len(axes) == 5
    assert [ax.get_subplotspec().get_geometry()[:2] for ax in axes] == [(2, 4)] * 5
    hidden = [ax for ax in fig.axes if not ax.get_visible()]
    assert len(hidden) == 3
    # the panels above the empty slots show their x tick labels (shared x axis)
    above = [axes[k] for k in (1, 2, 3)]
    assert all(ax.xaxis.get_tick_params()["labelbottom"] for ax in above)
    assert fig.get_figwidth() * MM_PER_INCH == pytest.approx(FIGURE_WIDTHS_MM["double"])
    with style_context():
        fig, axes = _panel_grid([3, 2], aspect=1.0)  # a block per field strength
    rows = [ax.get_subplotspec().rowspan.start for ax in axes]
    assert rows == [0, 0, 0, 1, 1]
    with pytest.raises(ValueError, match="blocks must be positive numbers of panels"):
        _panel_grid([], aspect=1.0)


def test_panel_letters():
    assert [_letter(k) for k in (0, 1, 25, 26, 27)] == ["a", "b", "z", "aa", "ab"]


# --- difference maps and paired means ------------------------------------------------------------


def test_difference_maps_have_methods_as_rows_and_groups_as_columns(three):
    drawn = {d.key: d for d in map_figures._difference_figures(three, {})}
    assert set(drawn) == {f"bullseye_difference_{p}_by_group" for p in ("ff", "r2star", "field")}
    item = drawn["bullseye_difference_ff_by_group"]
    grid = item.grid
    assert len(grid.axes) == 3 and all(len(row) == 3 for row in grid.axes)
    assert [row[0].get_ylabel() for row in grid.axes] == list(ORDER)
    norm, cmap = grid.mappable.norm, grid.mappable.cmap
    assert norm.vmin == pytest.approx(-norm.vmax)  # one symmetric scale for the figure
    paired = three.paired
    for i, method in enumerate(ORDER):
        for j, group in enumerate(("control", "acute", "chronic")):
            part = paired[
                (paired["parameter"] == "ff")
                & (paired["method"] == method)
                & (paired["group"] == group)
                & (paired["segment"] == 5)
            ]
            expected = float(np.median(part["test_value"] - part["reference_value"]))
            patch = next(p for p in grid.axes[i][j].patches if p.get_gid() == "segment-5")
            assert np.allclose(patch.get_facecolor(), cmap(norm(expected))), (method, group)
    assert item.method is None
    assert "rows, top to bottom: quickmap, c, b" in item.caption


def test_paired_figure_has_a_panel_per_method(three):
    items = {i.key: i for i in group_figures._paired_figures(three, {})}
    item = items["paired_ff_subject_mean"]
    panels = _panels(item.fig)
    assert [ax.get_title() for ax in panels] == list(ORDER)
    assert [ax.get_title(loc="left") for ax in panels] == ["a", "b", "c"]
    assert len(item.fig.legends) == 1 and all(ax.get_legend() is None for ax in panels)
    paired = three.paired
    for ax, method in zip(panels, ORDER, strict=True):
        part = paired[(paired["parameter"] == "ff") & (paired["method"] == method)]
        means = part.groupby("subject", observed=True)[["reference_value", "test_value"]].mean()
        drawn = {
            line.get_gid().removeprefix("subject-"): tuple(line.get_ydata())
            for line in ax.get_lines()
            if str(line.get_gid()).startswith("subject-")
        }
        assert set(drawn) == set(means.index.astype(str))
        for subject, (ref, test) in means.iterrows():
            assert drawn[str(subject)] == pytest.approx((ref, test))
    assert panels[0].get_shared_y_axes().joined(panels[0], panels[2])
    assert "field" in {s.key.split("_")[1] for s in items.values() if isinstance(s, SkippedFigure)}


def test_paired_r2star_has_field_strengths_in_rows(three):
    items = {i.key: i for i in group_figures._paired_figures(three, {})}
    panels = _panels(items["paired_r2star_subject_mean"].fig)
    assert len(panels) == 6  # 3 methods x 2 field strengths (R2* depends on B0)
    rows = [ax.get_subplotspec().rowspan.start for ax in panels]
    assert rows == [0, 0, 0, 1, 1, 1]
    notes = [_by_gid(ax, "numbers").get_text() for ax in panels]
    assert notes[0].startswith("1.5 T") and notes[3].startswith("3 T")
