"""The analysis pipeline: options from the study file, alerts shown first."""

from __future__ import annotations

import pandas as pd
import pytest

from cohort.analysis.pipeline import analyse, options_from_study
from cohort.demo import write_demo
from cohort.domain.problems import StudyError
from cohort.io.study import load_study


def test_swapped_fat_fractions_raise_an_alert(tmp_path):
    study_file = write_demo(tmp_path, n_subjects=9)
    values = pd.read_csv(study_file.parent / "values.csv", dtype=str, keep_default_na=False)
    ref = values[(values.method == "reference-fit") & (values.parameter == "ff")].set_index(
        ["subject", "segment"]
    )
    chosen = [("HV003", "5"), ("HV006", "9")]
    for subject, segment in chosen:
        row = (values.subject == subject) & (values.segment == segment) & (values.parameter == "ff")
        row &= values.method == "quickmap"
        # a fat-water swap reads about 100 minus the true fat fraction (DOMAIN.md; common practice)
        values.loc[row, "value"] = str(100 - float(ref.loc[(subject, segment), "value"]))
    values.to_csv(study_file.parent / "values.csv", index=False)
    study = load_study(study_file)
    analysis = analyse(study, options_from_study(study, n_boot=0, strata=("all",)))
    flags = analysis.tables["swap_flags"]
    assert set(zip(flags.subject, flags.segment.astype(str), strict=True)) == set(chosen)
    assert any(a.startswith("fat-water swap screen: 2 of") for a in analysis.alerts)


def test_analysis_options_come_from_the_study_file(tmp_path):
    study_file = write_demo(tmp_path, n_subjects=6)
    text = study_file.read_text() + '\n[analysis]\nseed = 5\nn_boot = 40\ncorrection = "fdr_bh"\n'
    study_file.write_text(text)
    options = options_from_study(load_study(study_file), n_boot=20)
    assert (options.seed, options.n_boot, options.correction) == (5, 20, "fdr_bh")  # flag wins


@pytest.mark.parametrize(
    "line, message",
    [("n_boots = 10", "unknown key 'n_boots'"), ("strata = 'all'", "strata is not valid"),
     ('correction = "bonferroni"', "correction is not valid"),
     ("workers = -1", "workers is not valid"), ("workers = 'many'", "workers is not valid")],
)  # fmt: skip
def test_bad_analysis_options_are_refused(tmp_path, line, message):
    study_file = write_demo(tmp_path, n_subjects=6)
    study_file.write_text(study_file.read_text() + f"\n[analysis]\n{line}\n")
    with pytest.raises(StudyError, match=message):
        options_from_study(load_study(study_file))
