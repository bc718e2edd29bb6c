"""Tests of cohort.plots.group_plots on a small invented cohort (drawn artists, not statistics).

Box plots are matplotlib's (quartiles, Tukey whiskers at 1.5 IQR: Tukey JW, Exploratory
Data Analysis, 1977 (memory)); checked here: one box per group and method, every value
drawn as a point at its own y, seeded jitter, order, and one line per subject.
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
import pytest
from matplotlib.colors import to_rgba

from cohort.domain.units import PARAMETERS
from cohort.plots.group_plots import group_distribution_plot, paired_lines_plot
from cohort.plots.style import CATEGORICAL, save_figure
from cohort.stats.results import CohortWarning


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    plt.close("all")


def _cohort(seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rows = []
    for group, n in (("control", 6), ("acute", 8), ("chronic", 5)):
        for k in range(n):
            subject = f"{group[:2]}{k:02d}"
            base = float(rng.normal(30.0, 4.0))
            rows.append((subject, group, "ref", "r2star", base))
            rows.append((subject, group, "fast", "r2star", base + float(rng.normal(1.0, 1.5))))
    return pd.DataFrame(rows, columns=["subject", "group", "method", "parameter", "value"])


def _by_gid(ax, gid):
    found = [a for a in ax.get_children() if a.get_gid() == gid]
    assert len(found) == 1, (gid, found)
    return found[0]


def test_one_box_per_group_and_method_with_every_value_as_a_point():
    table = _cohort()
    ax = group_distribution_plot(table)
    for group in ("control", "acute", "chronic"):
        for method in ("ref", "fast"):
            _by_gid(ax, f"box-{group}-{method}")
            points = _by_gid(ax, f"points-{group}-{method}").get_offsets()
            expected = table.loc[(table.group == group) & (table.method == method), "value"]
            np.testing.assert_allclose(np.sort(points[:, 1]), np.sort(expected.to_numpy()))
    boxes = [a for a in ax.get_children() if (a.get_gid() or "").startswith("box-")]
    assert len(boxes) == 6
    labels = [t.get_text() for t in ax.get_xticklabels()]
    assert labels == ["control\n(n = 6)", "acute\n(n = 8)", "chronic\n(n = 5)"]
    assert ax.get_ylabel() == PARAMETERS["r2star"].axis_label  # from the parameter column


def test_box_is_drawn_at_the_quartiles():
    # The box spans the first to third quartile and the median line sits at the median
    # (Tukey 1977 (memory); numpy's linear-interpolation percentiles, matplotlib's default).
    table = _cohort()
    ax = group_distribution_plot(table, method=None, order=["acute", "control", "chronic"])
    data = table.loc[table.group == "acute", "value"].to_numpy()
    box = _by_gid(ax, "box-acute")
    ys = box.get_path().vertices[:, 1]
    q1, median, q3 = np.percentile(data, [25, 50, 75])
    assert ys.min() == pytest.approx(q1) and ys.max() == pytest.approx(q3)
    medians = [
        line
        for line in ax.get_lines()
        if np.allclose(line.get_ydata(), median) and line.get_xdata()[0] < 0.5
    ]
    assert medians  # acute is first in the given order, at x = 0
    labels = [t.get_text().split("\n")[0] for t in ax.get_xticklabels()]
    assert labels == ["acute", "control", "chronic"]


def test_jitter_is_seeded_and_stays_inside_the_box():
    table = _cohort()
    first = _by_gid(group_distribution_plot(table, seed=7), "points-acute-fast").get_offsets()
    again = _by_gid(group_distribution_plot(table, seed=7), "points-acute-fast").get_offsets()
    other = _by_gid(group_distribution_plot(table, seed=8), "points-acute-fast").get_offsets()
    np.testing.assert_array_equal(first, again)
    assert not np.allclose(first[:, 0], other[:, 0])
    box = _by_gid(group_distribution_plot(table, seed=7), "box-acute-fast")
    xs = box.get_path().vertices[:, 0]
    assert xs.min() <= first[:, 0].min() and first[:, 0].max() <= xs.max()
    assert np.ptp(first[:, 0]) > 0  # points are spread, not stacked


def test_methods_get_okabe_ito_colours_and_a_legend():
    ax = group_distribution_plot(_cohort())
    ref = _by_gid(ax, "points-control-ref")
    fast = _by_gid(ax, "points-control-fast")
    np.testing.assert_allclose(ref.get_facecolor()[0][:3], to_rgba(CATEGORICAL[0])[:3])
    np.testing.assert_allclose(fast.get_facecolor()[0][:3], to_rgba(CATEGORICAL[1])[:3])
    assert [t.get_text() for t in ax.get_legend().get_texts()] == ["ref", "fast"]


def test_violin_skips_a_degenerate_group_with_a_warning():
    table = _cohort()
    table = table[table.method == "ref"].copy()
    table.loc[table.group == "chronic", "value"] = 31.0
    with pytest.warns(CohortWarning, match="violin not drawn for chronic-ref"):
        ax = group_distribution_plot(table, kind="violin")
    _by_gid(ax, "violin-acute-ref")
    assert not [a for a in ax.get_children() if a.get_gid() == "violin-chronic-ref"]
    assert len(_by_gid(ax, "points-chronic-ref").get_offsets()) == 5


def test_distribution_input_errors():
    table = _cohort()
    bad = table.copy()
    bad.loc[2, "value"] = np.nan
    with pytest.raises(ValueError, match="finite numbers, got 1 missing"):
        group_distribution_plot(bad)
    with pytest.raises(ValueError, match="no column"):
        group_distribution_plot(table, group="arm")
    with pytest.raises(ValueError, match="kind must be one of"):
        group_distribution_plot(table, kind="strip")
    with pytest.raises(ValueError, match="order must list every level"):
        group_distribution_plot(table, order=["control", "acute"])
    mixed = pd.concat([table, table.assign(parameter="ff")])
    with pytest.raises(ValueError, match="one parameter per figure"):
        group_distribution_plot(mixed)


def test_paired_lines_one_per_subject_from_reference_to_test():
    table = _cohort()
    ax = paired_lines_plot(table, reference="ref", test="fast")
    lines = [a for a in ax.get_lines() if (a.get_gid() or "").startswith("subject-")]
    assert len(lines) == table["subject"].nunique()
    wide = table.pivot(index="subject", columns="method", values="value")
    for line in lines:
        subject = line.get_gid().removeprefix("subject-")
        np.testing.assert_allclose(line.get_xdata(), [0.0, 1.0])
        np.testing.assert_allclose(
            line.get_ydata(), [wide.at[subject, "ref"], wide.at[subject, "fast"]]
        )
    assert [t.get_text() for t in ax.get_xticklabels()] == ["ref", "fast"]
    acute = _by_gid(ax, "subject-ac00")
    control = _by_gid(ax, "subject-co00")
    assert to_rgba(acute.get_color())[:3] != to_rgba(control.get_color())[:3]
    assert acute.get_marker() != control.get_marker()
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert legend == ["control (n = 6)", "acute (n = 8)", "chronic (n = 5)"]


def test_paired_lines_many_subjects_one_collection_per_group():
    # above PAIRED_LINES_MAX subjects the lines of a group are one collection, segments in
    # subject order from (0, reference) to (1, test), with the group's colour and marker
    from cohort.plots.group_plots import PAIRED_LINES_MAX

    rng = np.random.default_rng(4)
    n = PAIRED_LINES_MAX + 100
    ids = [f"s{i:04d}" for i in range(n)]
    groups = np.where(np.arange(n) % 3 == 0, "acute", "control")
    ref = rng.normal(30, 5, n)
    table = pd.concat(
        [
            pd.DataFrame({"subject": ids, "method": "ref", "value": ref, "group": groups}),
            pd.DataFrame({"subject": ids, "method": "fast", "value": ref + 1, "group": groups}),
        ]
    )
    ax = paired_lines_plot(table, reference="ref", test="fast")
    assert not [a for a in ax.get_lines() if (a.get_gid() or "").startswith("subject-")]
    colours = {}
    for group in ("acute", "control"):
        lines = _by_gid(ax, f"subjects-{group}")
        members = np.flatnonzero(groups == group)
        segments = np.array(lines.get_segments())
        assert segments.shape == (members.size, 2, 2)
        np.testing.assert_allclose(segments[:, 0, 0], 0.0)
        np.testing.assert_allclose(segments[:, 1, 0], 1.0)
        np.testing.assert_allclose(segments[:, 0, 1], ref[members])
        np.testing.assert_allclose(segments[:, 1, 1], ref[members] + 1)
        assert lines.get_rasterized()
        ends = _by_gid(ax, f"ends-{group}")
        assert len(ends.get_offsets()) == 2 * members.size
        colours[group] = tuple(np.round(lines.get_edgecolor()[0][:3], 6))
    assert colours["acute"] != colours["control"]
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert legend == [
        f"acute (n = {(groups == 'acute').sum()})",
        f"control (n = {(groups == 'control').sum()})",
    ]


def test_paired_lines_input_errors():
    table = _cohort()
    with pytest.raises(ValueError, match=r"lack one, e.g. \['co00'\]"):
        paired_lines_plot(table.drop(index=1), reference="ref", test="fast")
    with pytest.raises(ValueError, match=r"one row per \(subject, method\)"):
        paired_lines_plot(pd.concat([table, table.iloc[:1]]), reference="ref", test="fast")
    with pytest.raises(ValueError, match="no rows for method"):
        paired_lines_plot(table, reference="ref", test="slow")
    moved = table.copy()
    moved.loc[0, "group"] = "acute"
    with pytest.raises(ValueError, match="each subject must be in one group"):
        paired_lines_plot(moved, reference="ref", test="fast")


def test_group_plots_leave_the_table_unchanged_and_write_files(tmp_path):
    table = _cohort()
    before = table.copy(deep=True)
    digest = pd.util.hash_pandas_object(table, index=True).to_numpy().copy()
    figures = {
        "box": group_distribution_plot(table).figure,
        "violin": group_distribution_plot(table, kind="violin").figure,
        "paired": paired_lines_plot(table, reference="ref", test="fast").figure,
    }
    pd.testing.assert_frame_equal(table, before)
    np.testing.assert_array_equal(pd.util.hash_pandas_object(table, index=True), digest)
    for name, fig in figures.items():
        paths = save_figure(fig, tmp_path / name, dpi=100)
        assert [p.suffix for p in paths] == [".png", ".svg"]
        assert all(p.stat().st_size > 1000 for p in paths)
