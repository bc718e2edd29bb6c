"""Tests of cohort.figures.figure_set: the report's figures drawn from given tables and saved.

The study is the invented demo cohort (12 subjects) and the tables are small fakes with the
documented columns, so every expected number here is computed in the test from the study's
own frames with numpy, independently of the module. File checks use the published
signatures of the formats: PNG files start with the 8 bytes 89 50 4E 47 0D 0A 1A 0A (PNG
specification, W3C Recommendation 2003, section 5.2); SVG documents have the root element
``svg`` in the namespace http://www.w3.org/2000/svg (SVG 1.1, W3C 2011, section 5.1).
"""

from __future__ import annotations

import copy
import dataclasses
import math
import re
import warnings
import xml.etree.ElementTree as ET

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
import pytest
from matplotlib.colors import to_rgba

from cohort.demo import write_demo
from cohort.domain.units import PARAMETERS
from cohort.figures import agreement as agreement_figures
from cohort.figures import figure_set
from cohort.figures import findings as findings_figures
from cohort.figures import maps as map_figures
from cohort.figures import records as figure_records
from cohort.figures import subjects as subject_figures
from cohort.figures import tables as figure_tables
from cohort.figures.figure_set import SECTIONS, FigureRecord, FigureSet, make_figures
from cohort.figures.tables import FINDINGS_REQUIRED
from cohort.io.study import load_study
from cohort.parallel import can_fork
from cohort.plots.bullseye import OUTLINE_COLOUR, OUTLINE_WIDTH

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (W3C 2003), section 5.2
SVG_NAMESPACE = "{http://www.w3.org/2000/svg}"  # SVG 1.1 (W3C 2011), section 5.1

# Demo thresholds for the fake findings table: R2* > 50 1/s at 1.5 T, 79 1/s at 3 T
# (the package defaults of cohort.domain.thresholds, common practice), fat fraction >= 10 %.
HEMORRHAGE = {1.5: 50.0, 3.0: 79.0}
FAT = 10.0


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    plt.close("all")


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo")
    return load_study(write_demo(folder, n_subjects=12))


def fake_agreement(study) -> pd.DataFrame:
    """Agreement rows with the documented columns, numbers computed here with numpy."""
    rows = []
    for (parameter, method), part in study.paired.groupby(["parameter", "method"], sort=False):
        d = (part["test_value"] - part["reference_value"]).to_numpy()
        bias, sd = float(np.mean(d)), float(np.std(d, ddof=1))
        row = {
            "parameter": parameter,
            "method": method,
            "reference": study.reference,
            "n_subjects": part["subject"].nunique(),
            "n_pairs": len(part),
            "bias": bias,
            "bias_ci_low": bias - 0.1 * sd,
            "bias_ci_high": bias + 0.1 * sd,
            "loa_low": bias - 1.96 * sd,
            "loa_high": bias + 1.96 * sd,
            "loa_low_ci_low": bias - 2.2 * sd,
            "loa_low_ci_high": bias - 1.8 * sd,
            "loa_high_ci_low": bias + 1.8 * sd,
            "loa_high_ci_high": bias + 2.2 * sd,
            "ccc": 0.9,
            "ccc_ci_low": 0.85,
            "ccc_ci_high": 0.95,
            "pb_slope": 1.0,
            "pb_intercept": 0.0,
            "confidence_level": 0.95,
            "ci_method": "fake intervals for the test",
        }
        ratio = sd_log = math.nan  # ratio scale only for R2*, as the package's default
        if parameter == "r2star":
            log_ratio = np.log(part["test_value"] / part["reference_value"]).to_numpy()
            ratio, sd_log = float(np.exp(np.mean(log_ratio))), float(np.std(log_ratio, ddof=1))
        row.update(
            ratio_bias=ratio,
            ratio_loa_low=ratio * math.exp(-1.96 * sd_log),
            ratio_loa_high=ratio * math.exp(1.96 * sd_log),
        )
        rows.append({**row, "stratum": "all"})
        rows.append({**row, "stratum": "group=acute", "bias": bias + 1.0})
    return pd.DataFrame(rows)


def fake_findings(study) -> pd.DataFrame:
    """Segment findings of every method with the documented columns (thresholds above)."""
    v = study.values
    parts = []
    r2 = v[v["parameter"] == "r2star"].copy()
    r2["threshold"] = r2["field_strength"].map(HEMORRHAGE)
    r2["finding"] = "hemorrhage"
    ff = v[v["parameter"] == "ff"].copy()
    ff["threshold"] = FAT
    ff["finding"] = "fat"
    for part, above in ((r2, r2["value"] > r2["threshold"]), (ff, ff["value"] >= FAT)):
        part["positive"] = above.astype(bool)
        parts.append(part)
    columns = [*FINDINGS_REQUIRED, "value", "threshold", "parameter", "field_strength"]
    return pd.concat(parts, ignore_index=True)[columns]


@pytest.fixture(scope="module")
def tables(study):
    return {"agreement": fake_agreement(study), "findings_segment": fake_findings(study)}


@pytest.fixture(scope="module")
def drawn(study, tables, tmp_path_factory):
    """One full run (PNG and SVG), with copies of every input taken before it."""
    before = {
        "tables": {k: v.copy(deep=True) for k, v in tables.items()},
        "values": study.values.copy(deep=True),
        "paired": study.paired.copy(deep=True),
        "subjects": study.subjects.copy(deep=True),
        "attrs": copy.deepcopy(study.values.attrs),
    }
    folder = tmp_path_factory.mktemp("figures")
    messages: list[str] = []
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no warning expected from consistent inputs
        # 72 dpi keeps the test fast; the resolution does not change what is drawn
        records = make_figures(study, tables, folder, dpi=72, progress=messages.append)
    return records, folder, messages, before


def by_key(records) -> dict[str, FigureRecord]:
    return {r.key: r for r in records}


# --- files and records ---------------------------------------------------------------------


def test_every_figure_is_a_non_empty_png_and_svg(drawn):
    records, folder, _, _ = drawn
    assert len(records) >= 15
    for record in records:
        suffixes = sorted(p.suffix for p in record.paths)
        assert suffixes == [".png", ".svg"], record.key
        for path in record.paths:
            assert path.parent == folder and path.stem == record.key
            assert path.stat().st_size > 1000, path
        png = next(p for p in record.paths if p.suffix == ".png")
        assert png.read_bytes()[:8] == PNG_SIGNATURE
        svg = next(p for p in record.paths if p.suffix == ".svg")
        assert ET.parse(svg).getroot().tag == f"{SVG_NAMESPACE}svg"


def test_no_other_files_are_written(drawn):
    records, folder, _, _ = drawn
    written = {p for r in records for p in r.paths}
    assert set(folder.iterdir()) == written


def test_keys_are_unique_and_records_are_complete(drawn):
    records, _, _, _ = drawn
    assert isinstance(records, FigureSet) and isinstance(records, list)
    keys = [r.key for r in records]
    assert len(keys) == len(set(keys))
    for record in records:
        assert record.section in SECTIONS
        assert record.title and len(record.caption) > 80
        assert record.parameter is None or record.parameter in PARAMETERS
    with pytest.raises(AttributeError):
        records[0].key = "changed"  # frozen dataclass


def test_the_figures_of_the_brief_are_there(drawn, study):
    keys = set(by_key(drawn[0]))
    expected = {
        "bland_altman_r2star",
        "bland_altman_ratio_r2star",
        "scatter_ff",
        "bullseye_median_ff_by_group_method",
        "bullseye_difference_r2star_by_group",
        "bullseye_prevalence_hemorrhage_by_group_method",
        "bullseye_prevalence_fat_by_group_method",
        "bullseye_subjects_r2star",
        "groups_r2star_subject_mean",
        "paired_ff_subject_mean",
    }
    assert expected <= keys
    # R2* depends on B0 (Storey et al., J Magn Reson Imaging 2007): one median map per
    # field strength of the demo; fat fraction does not, so one map.
    strengths = sorted(study.subjects["field_strength"].unique())
    assert len(strengths) == 2
    for b0 in strengths:
        assert f"bullseye_median_r2star_{b0:g}T_by_group_method" in keys
    assert "bullseye_median_ff_1.5T_by_group_method" not in keys
    # ratio limits only where the table has them (NaN for ff and field)
    assert "bland_altman_ratio_ff" not in keys


def test_the_set_stays_small_for_the_demo(drawn):
    assert len(drawn[0]) <= 25


def test_progress_is_called_once_per_figure(drawn):
    records, _, messages, _ = drawn
    assert len(messages) == len(records)
    assert all(r.key in m for r, m in zip(records, messages, strict=True))


@pytest.mark.skipif(not can_fork(), reason="worker processes are forked on Linux only")
def test_worker_processes_draw_the_same_set(study, tables, drawn, tmp_path):
    # each part of the set is drawn from the same inputs in whichever process: the records
    # and every file must equal those of the serial run, byte for byte
    records, folder, _, _ = drawn
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        # PNG only keeps the test fast; the SVGs come from the same drawn figures
        parallel = make_figures(study, tables, tmp_path, formats=("png",), dpi=72, workers=2)
    assert [(r.key, r.title, r.caption, r.section) for r in parallel] == [
        (r.key, r.title, r.caption, r.section) for r in records
    ]
    assert parallel.skipped == records.skipped
    for record in parallel:
        for path in record.paths:
            assert path.read_bytes() == (folder / path.name).read_bytes(), path.name


# --- captions ----------------------------------------------------------------------------


def test_captions_name_the_unit(drawn):
    for record in drawn[0]:
        if record.parameter is not None:
            unit = PARAMETERS[record.parameter].unit
            assert f"({unit})" in record.caption, record.key
        if record.key.startswith("bullseye_prevalence"):
            assert "%" in record.caption


def test_agreement_captions_give_counts_estimator_and_ci(drawn, study, tables):
    records = by_key(drawn[0])
    for parameter in ("ff", "r2star", "field"):
        ba = records[f"bland_altman_{parameter}"].caption
        scatter = records[f"scatter_{parameter}"].caption
        for method in study.test_methods:
            pairs = study.paired[
                (study.paired["parameter"] == parameter) & (study.paired["method"] == method)
            ]
            n_subjects = pairs["subject"].nunique()
            counts = f"{len(pairs)} (subject, segment) pairs from {n_subjects} subjects"
            assert counts in ba and counts in scatter
        assert "Bland & Altman 2007" in ba and "1.96 SD" in ba
        assert "95% CIs" in ba and "fake intervals for the test" in ba
        assert "Passing-Bablok" in scatter and "concordance" in scatter


def test_group_captions_say_the_means_are_for_display(drawn):
    records = by_key(drawn[0])
    caption = records["groups_r2star_subject_mean"].caption
    assert "for display only" in caption and "arithmetic mean" in caption
    assert "1.5 T and 3 T" in caption


def test_prevalence_caption_states_the_outline_rule(drawn):
    caption = by_key(drawn[0])["bullseye_prevalence_hemorrhage_by_group_method"].caption
    assert "at least 10 percentage points below" in caption
    # thresholds read from the table, with their unit and field strength
    assert "50 1/s at 1.5 T" in caption and "79 1/s at 3 T" in caption


# --- inputs stay as they were -------------------------------------------------------------


def test_inputs_are_unchanged(drawn, study, tables):
    before = drawn[3]
    for name, table in tables.items():
        pd.testing.assert_frame_equal(table, before["tables"][name])
    pd.testing.assert_frame_equal(study.values, before["values"])
    pd.testing.assert_frame_equal(study.paired, before["paired"])
    pd.testing.assert_frame_equal(study.subjects, before["subjects"])
    assert study.values.attrs == before["attrs"]


# --- absent, empty and malformed tables ---------------------------------------------------


def test_absent_tables_skip_their_figures(study, tmp_path):
    # fat fraction only, to keep the run short; the skipping does not depend on it
    study = dataclasses.replace(
        study,
        values=study.values[study.values["parameter"] == "ff"],
        paired=study.paired[study.paired["parameter"] == "ff"],
    )
    folder = tmp_path / "not" / "yet"
    records = make_figures(study, {}, folder, formats=("png",), dpi=40)
    assert folder.is_dir() and all(p.exists() for r in records for p in r.paths)
    keys = {r.key for r in records}
    skipped = {s.key: s.reason for s in records.skipped}
    assert not any(k.startswith(("bland_altman", "scatter", "bullseye_prevalence")) for k in keys)
    assert "bland_altman_ff" in skipped and "scatter_ff" in skipped
    assert "no 'agreement' table" in skipped["bland_altman_ff"]
    assert "bullseye_prevalence_by_group_method" in skipped
    assert "bullseye_subjects_r2star" in skipped
    # figures that need only the study are still drawn
    assert "bullseye_median_ff_by_group_method" in keys and "groups_ff_subject_mean" in keys
    assert all(p.suffix == ".png" for r in records for p in r.paths)
    frame = records.to_frame()
    assert len(frame) == len(records) + len(records.skipped)
    assert (frame["skipped_reason"] != "").sum() == len(records.skipped)


def test_empty_tables_skip_their_figures(study, tables, tmp_path):
    empty = {name: table.iloc[0:0] for name, table in tables.items()}
    reasons = {}
    for source in (
        agreement_figures._agreement_figures(study, empty),
        findings_figures._prevalence_figures(study, empty),
        subject_figures._subject_figure(study, empty, ()),
    ):
        for item in source:
            assert isinstance(item, figure_set.SkippedFigure), item.key
            reasons[item.key] = item.reason
    assert "the 'findings_segment' table is empty" in reasons["bullseye_prevalence_by_group_method"]
    assert any("'agreement' table is empty" in r for r in reasons.values())


def test_a_missing_column_is_an_error_naming_it(study, tables, tmp_path):
    broken = {"agreement": tables["agreement"].drop(columns=["loa_low"])}
    with pytest.raises(ValueError, match=r"lacks the column\(s\) \['loa_low'\]"):
        make_figures(study, broken, tmp_path)


def test_arguments_are_checked(study, tables, tmp_path):
    with pytest.raises(ValueError, match="formats must be a non-empty sequence"):
        make_figures(study, tables, tmp_path, formats="png")
    with pytest.raises(ValueError, match="subjects_to_show must be a sequence"):
        make_figures(study, tables, tmp_path, subjects_to_show="HV001")
    with pytest.raises(ValueError, match=r"subjects_to_show names subjects not in the study"):
        list(subject_figures._subject_figure(study, tables, ["nobody"]))


# --- what is drawn ------------------------------------------------------------------------


def test_bland_altman_draws_the_table_row(study, tables):
    drawn = next(agreement_figures._agreement_figures(study, tables))
    assert drawn.key == "bland_altman_ff"
    panels = [ax for ax in drawn.fig.axes if ax.get_visible()]
    assert len(panels) == len(study.test_methods)
    for ax, method in zip(panels, study.test_methods, strict=True):
        row = (
            tables["agreement"]
            .query("parameter == 'ff' and stratum == 'all' and method == @method")
            .iloc[0]
        )
        pairs = study.paired[
            (study.paired["parameter"] == "ff") & (study.paired["method"] == method)
        ]
        lines = {line.get_gid(): line for line in ax.get_lines()}
        # the stratum "all" row, not the group row whose bias is 1 higher
        assert lines["bias"].get_ydata()[0] == pytest.approx(row["bias"])
        assert lines["loa_high"].get_ydata()[0] == pytest.approx(row["loa_high"])
        points = sum(
            len(c.get_offsets()) for c in ax.collections if str(c.get_gid()).startswith("p")
        )
        assert points == len(pairs)
    # the one legend (above the panels) fits inside the figure
    fig = drawn.fig
    fig.draw_without_rendering()
    box = fig.legends[0].get_window_extent(fig.canvas.get_renderer())
    assert box.x1 <= fig.bbox.x1 + 1 and box.x0 >= fig.bbox.x0 - 1


def test_median_map_colours_are_numpy_medians(study):
    drawn = next(map_figures._median_figures(study, {}))
    assert drawn.key == "bullseye_median_ff_by_group_method"
    v = study.values
    part = v[(v["parameter"] == "ff") & (v["group"] == "control") & (v["method"] == "quickmap")]
    expected = float(np.median(part.loc[part["segment"] == 5, "value"].to_numpy()))
    # panel (first group, quickmap's column: the reference, then the study's order)
    ax = drawn.grid.axes[0][list(study.methods).index("quickmap")]
    patch = next(p for p in ax.patches if p.get_gid() == "segment-5")
    norm, cmap = drawn.grid.mappable.norm, drawn.grid.mappable.cmap
    assert np.allclose(patch.get_facecolor(), cmap(norm(expected)))
    # limits from 0 (or a lower median: noise near 0 % is signed) to the highest median
    ff = v[v["parameter"] == "ff"]
    medians = [
        float(np.median(g["value"].to_numpy()))
        for _, g in ff.groupby(["group", "method", "segment"])
    ]
    assert norm.vmin == pytest.approx(min(0.0, min(medians)))
    assert norm.vmax == pytest.approx(max(medians))


def test_difference_maps_are_centred_at_zero(study):
    for drawn in map_figures._difference_figures(study, {}):
        norm = drawn.grid.mappable.norm
        assert norm.vmin == pytest.approx(-norm.vmax), drawn.key
        plt.close(drawn.fig)


def test_prevalence_outlines_segments_the_test_method_misses(study):
    """Invented table: in the acute group the reference is positive in segment 3 for 2 of
    8 subjects more than the test (25 points); elsewhere both agree."""
    subjects = [f"S{i}" for i in range(8)]
    rows = []
    for method in ("reference-fit", "quickmap"):
        for k, s in enumerate(subjects):
            for segment in range(1, 18):
                positive = segment == 3 and (k < 3 if method == "reference-fit" else k < 1)
                positive |= segment == 7 and k == 0  # 12.5 % in both methods
                rows.append((s, "acute", method, segment, "hemorrhage", positive))
    table = pd.DataFrame(rows, columns=list(FINDINGS_REQUIRED))
    (drawn,) = list(findings_figures._prevalence_figures(study, {"findings_segment": table}))
    polar = [ax for ax in drawn.fig.axes if ax.name == "polar"]
    reference_ax, test_ax = polar
    outlined = [
        p.get_gid()
        for p in test_ax.patches
        if p.get_linewidth() == pytest.approx(OUTLINE_WIDTH)
        and np.allclose(p.get_edgecolor(), to_rgba(OUTLINE_COLOUR))
    ]
    assert outlined == ["segment-3"]
    assert not any(p.get_linewidth() == pytest.approx(OUTLINE_WIDTH) for p in reference_ax.patches)
    notes = {t.get_gid(): t.get_text() for t in reference_ax.texts}
    assert notes["annotation-3"] == "38"  # 3/8 = 37.5 %, rounded half up
    assert notes["annotation-7"] == "13"  # 1/8 = 12.5 %, rounded half up


def test_default_subjects_are_reference_positive_in_id_order(study, tables):
    findings = tables["findings_segment"]
    positive = findings[
        (findings["finding"] == "hemorrhage")
        & (findings["method"] == study.reference)
        & findings["positive"]
    ]
    expected = sorted(positive["subject"].unique())[: figure_set.MAX_SUBJECTS_SHOWN]
    assert expected  # the demo plants hemorrhage in acute patients
    chosen = subject_figures._default_subjects(findings, "hemorrhage", study.reference)
    assert chosen == expected
    (drawn,) = list(subject_figures._subject_figure(study, tables, ()))
    titles = [ax.get_title() for ax in drawn.fig.axes if ax.name == "polar" and ax.get_visible()]
    assert len(titles) == len(expected) * len(study.methods)
    assert [t.split(",")[0] for t in titles[:: len(study.methods)]] == expected


def test_named_subjects_are_drawn_six_to_a_figure(study, tables):
    named = sorted(study.subjects["subject"])[:7]
    drawn = list(subject_figures._subject_figure(study, tables, [*named, named[0]]))  # a repeat
    assert [d.key for d in drawn] == [
        "bullseye_subjects_r2star_part1",
        "bullseye_subjects_r2star_part2",
    ]
    panels = [sum(ax.get_visible() for ax in d.fig.axes if ax.name == "polar") for d in drawn]
    assert panels == [6 * len(study.methods), 1 * len(study.methods)]
    # one colour scale for both parts
    assert drawn[0].grid.mappable.norm.vmax == drawn[1].grid.mappable.norm.vmax
    assert "part 2 of 2" in drawn[1].caption


def test_field_group_plots_are_skipped_when_referenced_to_the_subject_median(drawn, study):
    assert study.settings.field_referencing == "subject-median"
    records = drawn[0]
    reasons = {s.key: s.reason for s in records.skipped}
    assert "groups_field_subject_mean" in reasons
    assert "close to 0 by construction" in reasons["groups_field_subject_mean"]


def test_column_names_match_the_tables_of_the_package():
    """The constants name real columns of the agreement and findings tables."""
    from cohort.analysis.agreement_table import AGREEMENT_COLUMNS
    from cohort.analysis.findings import SEGMENT_COLUMNS

    used = [
        *figure_tables.AGREEMENT_REQUIRED,
        *figure_tables.LIMIT_CI_COLUMNS,
        *figure_tables.RATIO_COLUMNS.values(),
        figure_tables.CONFIDENCE_LEVEL,
        figure_tables.CI_METHOD,
        figure_tables.NOTE,
        figure_tables.CCC,
        *figure_tables.CCC_CI,
        figure_tables.PB_SLOPE,
        figure_tables.PB_INTERCEPT,
        *figure_tables.PB_SLOPE_CI,
        *figure_tables.PB_INTERCEPT_CI,
        figure_tables.PB_CI_METHOD,
    ]
    assert [c for c in used if c not in AGREEMENT_COLUMNS] == []
    assert [c for c in FINDINGS_REQUIRED if c not in SEGMENT_COLUMNS] == []


def test_real_tables_of_the_package_are_drawn(study, tmp_path):
    """Integration: the agreement table without bootstrap (no CI bands) and the findings."""
    from cohort.analysis.agreement_table import agreement_table
    from cohort.analysis.findings import evaluate_findings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        agreement = agreement_table(study.paired, strata=("all",), n_boot=0)
        findings = evaluate_findings(study.values, study.subjects).segments
    tables = {"agreement": agreement, "findings_segment": findings}
    gen = agreement_figures._agreement_figures(study, tables)
    first = next(gen)
    assert first.key == "bland_altman_ff"
    assert "No CI bands" in first.caption
    (prevalence, *_) = list(findings_figures._prevalence_figures(study, tables))
    assert prevalence.key == "bullseye_prevalence_hemorrhage_by_group_method"


# --- long and awkward method names -----------------------------------------------------------
# File names: at most 255 bytes per name on the common file systems (ext4, NTFS, APFS;
# memory) and none of / \ : * ? " < > | (forbidden on Windows; memory).

LONG_REFERENCE = (
    "Reference multi-echo fit / 12 echoes: * \u00e9 water-fat model with R2* correction, "
    + "long description " * 6
).strip()  # the loader trims identifiers
LONG_A = "Quick map: one breath-hold / vendor-neutral * with \u00fcmlauts $x$ and " + "x" * 150
LONG_B = LONG_A[:-1] + "y"  # differs from LONG_A only in its last character


@pytest.fixture(scope="module")
def long_named(tmp_path_factory):
    folder = tmp_path_factory.mktemp("long")
    write_demo(folder, n_subjects=12)
    values = pd.read_csv(folder / "values.csv", dtype=str, keep_default_na=False)
    test = values[values["method"] == "quickmap"]
    other = test.assign(value=pd.to_numeric(test["value"]).mul(1.03).round(3))  # blank: NaN
    renamed = pd.concat(
        [
            values[values["method"] == "reference-fit"].assign(method=LONG_REFERENCE),
            test.assign(method=LONG_A),
            other.assign(method=LONG_B),
        ]
    )
    renamed.to_csv(folder / "values.csv", index=False)
    toml = (folder / "study.toml").read_text(encoding="utf-8")
    toml = toml.replace('reference = "reference-fit"', f'reference = "{LONG_REFERENCE}"')
    # the demo's study file names its methods (order, labels, swap screen): not these
    toml = re.sub(r"(?m)^(methods|magnitude_only_methods) = .*$", "", toml)
    toml = re.sub(r"\[study\.method_labels\]\n(.+\n)+", "", toml)
    (folder / "study.toml").write_text(toml, encoding="utf-8")
    study = load_study(folder / "study.toml")
    tables = {"agreement": fake_agreement(study), "findings_segment": fake_findings(study)}
    out = tmp_path_factory.mktemp("long_figures")
    records = make_figures(study, tables, out, formats=("png",), dpi=50)
    return study, records, out


def test_long_names_give_valid_distinct_file_names(long_named):
    study, records, out = long_named
    assert len(LONG_A) > 200 and len(LONG_REFERENCE) > 100
    assert {LONG_A, LONG_B} == set(study.test_methods)
    files = sorted(out.iterdir())
    assert files == sorted(p for r in records for p in r.paths)  # every figure written
    names = [p.name for p in files]
    assert len({n.casefold() for n in names}) == len(names)
    for name in names:
        assert len(name.encode("utf-8")) <= 255, name
        assert not set(name) & set('/\\:*?"<>| $'), name
        assert name.isascii(), name
    for prefix in ("bland_altman_ff.", "scatter_r2star.", "paired_ff_subject_mean."):
        assert sum(n.startswith(prefix) for n in names) == 1, prefix  # one for all methods


def test_long_names_are_in_full_in_the_captions_and_records(long_named):
    _, records, _ = long_named
    combined = [r for r in records if r.key.startswith(("bland_altman_", "scatter_", "paired_"))]
    assert combined and all(r.method is None for r in combined)  # a figure of both methods
    for record in combined:
        assert LONG_A in record.caption and LONG_B in record.caption, record.key
    maps = by_key(records)["bullseye_median_ff_by_group_method"]
    for name in (LONG_REFERENCE, LONG_A, LONG_B):
        assert f"'{name}'" in maps.caption


def test_long_names_are_shortened_in_the_drawn_text(study, tmp_path):
    from cohort.plots.style import ELLIPSIS, LABEL_WIDTH, fit_label

    fitted = fit_label(LONG_A)
    assert fitted.endswith(ELLIPSIS)
    assert fit_label("a $x$ b") == "a \\$x\\$ b"  # escaped: not read as mathtext
    assert all(len(line) <= LABEL_WIDTH for line in fitted.replace("\\$", "$").split("\n"))
    assert fit_label("quickmap") == "quickmap"
    assert figure_records._slug("quickmap") == "quickmap"  # short plain names unchanged
    assert figure_records._slug(LONG_A) != figure_records._slug(LONG_B)
    assert figure_records._slug("a/b") != figure_records._slug("a:b")  # both slug to "a-b"
