"""An invented demo cohort with a planted truth (for the demo, tutorials and benchmarks only).

Scenario (invented; no real people, sites or data): the "Harbour Valley myocardial tissue
study" scans healthy volunteers and patients after myocardial infarction on two scanners,
one at 1.5 T and one at 3 T. Each heart is analysed with the study's reference multi-echo
fit (``reference-fit``) and with a fast method (``quickmap``) that uses fewer echoes.

Planted truth (what a correct analysis must recover):

- fat fraction: quickmap = 0.5 + 1.05 x reference-truth (percentage points), noise SD
  0.8 pp against 0.5 pp for the reference;
- R2*: quickmap compresses high values: above 45 1/s (1.5 T; 3 T: 1.88 x 45 - 15 = 69.6 1/s)
  it keeps only 35 % of the excess, so hemorrhage with a true R2* below about 59 1/s at
  1.5 T (96.5 1/s at 3 T) falls under the 50 (79) 1/s threshold and is missed; elsewhere it
  agrees (noise SD 3 1/s). Subjects differ in normal R2* (subject SD 4 1/s), which keeps
  the overall concordance high while lesions are missed;
- field: identical up to noise (SD 2 Hz) after per-subject referencing; each acquisition
  has its own arbitrary offset (uniform -40 to 40 Hz) that referencing must remove;
- lesions: acute patients have hemorrhage (true R2* 52-75 1/s at 1.5 T) in 1-4 segments of
  the culprit territory;
  chronic patients have fatty replacement (8-25 % fat) in 1-4 such segments;
- missing data: quickmap has no apex (segment 17) value in one subject in eight.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import NamedTuple

import numpy as np
import pandas as pd

from cohort.domain.segments import SEGMENTS

REFERENCE = "reference-fit"
TEST = "quickmap"
GROUPS = ("control", "acute", "chronic")
FF_BIAS, FF_SLOPE = 0.5, 1.05
R2_KNEE_15T, R2_KEEP = 45.0, 0.35


class DemoSize(NamedTuple):
    low: int
    high: int
    default: int


DEMO_SUBJECTS = DemoSize(6, 100_000, 48)
"""Sizes of the demo cohort: at least two subjects per group, at most what the scale
benchmark uses; 48 unless asked."""
DEMO_SEED = 20261202
"""Seed of the demo cohort unless asked (the date of this version)."""

_TERRITORY_SEGMENTS = {
    t: np.array([n for n, s in SEGMENTS.items() if s.territory == t]) for t in ("LAD", "RCA", "LCx")
}


def r2star_at(field_strength: np.ndarray, r2star_15t: np.ndarray) -> np.ndarray:
    """Myocardial R2* at 3 T from 1.5 T: 1.88 x R2*(1.5 T) - 15 1/s (Storey et al. 2007)."""
    return np.where(field_strength > 2.0, 1.88 * r2star_15t - 15.0, r2star_15t)


@dataclass(frozen=True)
class DemoCohort:
    values: pd.DataFrame
    subjects: pd.DataFrame
    lesions: pd.DataFrame
    """Planted lesions: subject, segment, kind (hemorrhage or fat)."""


def make_demo(n_subjects: int = DEMO_SUBJECTS.default, seed: int = DEMO_SEED) -> DemoCohort:
    """Generate the invented cohort (vectorised: 100,000 subjects take seconds).

    Examples
    --------
    >>> demo = make_demo(6)
    >>> len(demo.subjects), len(demo.values), sorted(set(demo.lesions["kind"]))
    (6, 612, ['fat', 'hemorrhage'])
    """
    rng = np.random.default_rng(seed)  # every draw below in a fixed order: same seed, same cohort
    subjects = _subjects(rng, n_subjects)
    group = subjects["group"].to_numpy()
    subj_idx = np.repeat(np.arange(n_subjects), len(SEGMENTS))
    segment = np.tile(np.arange(1, len(SEGMENTS) + 1), n_subjects)
    lesion = _plant_lesions(rng, group, subjects["culprit_territory"].to_numpy())
    hem = lesion & (group[subj_idx] == "acute")
    fat = lesion & (group[subj_idx] == "chronic")
    field_s = subjects["field_strength"].to_numpy()[subj_idx]
    ids = subjects["subject"].to_numpy()
    reference, test = _measured(
        rng, _truth(rng, segment, field_s, subj_idx, hem, fat), field_s, subj_idx
    )
    values = pd.concat(
        [
            _long(ids[subj_idx], segment, REFERENCE, reference),
            _long(ids[subj_idx], segment, TEST, test),
        ],
        ignore_index=True,
    )
    values["value"] = values["value"].astype(object)
    # Series.isin hashes; np.isin on text compares pair by pair (minutes at 100,000 subjects)
    no_apex = (
        values["subject"].isin(ids[::8]) & values["method"].eq(TEST) & values["segment"].eq(17)
    )
    values.loc[no_apex, "value"] = ""
    lesions = pd.DataFrame(
        {
            "subject": ids[subj_idx[lesion]],
            "segment": segment[lesion],
            "kind": np.where(hem[lesion], "hemorrhage", "fat"),
        }
    )
    return DemoCohort(values, subjects, lesions)


def _subjects(rng: np.random.Generator, n_subjects: int) -> pd.DataFrame:
    """The subjects table: groups in turn, field strength, culprit territory, covariates."""
    width = max(3, len(str(n_subjects)))
    ids = np.array([f"HV{str(i + 1).zfill(width)}" for i in range(n_subjects)])
    group = np.array(GROUPS)[np.arange(n_subjects) % 3]
    b0 = np.where(rng.random(n_subjects) < 0.5, 1.5, 3.0)
    culprit = np.where(group == "control", "", rng.choice(["LAD", "RCA", "LCx"], n_subjects))
    subjects = pd.DataFrame(
        {
            "subject": ids,
            "group": group,
            "field_strength": b0,
            "age": rng.integers(35, 80, n_subjects),
            "sex": rng.choice(["F", "M"], n_subjects),
            "culprit_territory": culprit,
            "days_since_infarction": np.where(
                group == "acute",
                rng.integers(2, 8, n_subjects),
                np.where(group == "chronic", rng.integers(180, 900, n_subjects), 0),
            ),
        }
    )
    subjects["days_since_infarction"] = subjects["days_since_infarction"].astype(object)
    subjects.loc[group == "control", "days_since_infarction"] = ""
    return subjects


def _plant_lesions(rng: np.random.Generator, group: np.ndarray, culprit: np.ndarray) -> np.ndarray:
    """Lesion mask per (subject, segment): 1-4 segments of the culprit territory per patient."""
    n_segments = len(SEGMENTS)
    lesion = np.zeros(len(group) * n_segments, dtype=bool)
    for i in np.flatnonzero(group != "control"):
        segs = _TERRITORY_SEGMENTS[culprit[i]]
        chosen = rng.choice(segs, size=rng.integers(1, 5), replace=False)
        lesion[i * n_segments + chosen - 1] = True
    return lesion


def _truth(
    rng: np.random.Generator,
    segment: np.ndarray,
    field_s: np.ndarray,
    subj_idx: np.ndarray,
    hem: np.ndarray,
    fat: np.ndarray,
) -> dict[str, np.ndarray]:
    """True fat fraction, R2* and field per (subject, segment), and each acquisition's
    arbitrary field offset (``offset``: one row per method)."""
    n, n_subjects = len(segment), int(subj_idx.max(initial=-1)) + 1
    inferolateral = np.isin(segment, (5, 11))
    ff_true = np.clip(rng.normal(0.8, 0.5, n), 0.0, None)
    ff_true[fat] = rng.uniform(8.0, 25.0, fat.sum())
    r2_15 = (
        rng.normal(23.0, 2.5, n) + 5.0 * inferolateral + rng.normal(0.0, 4.0, n_subjects)[subj_idx]
    )
    r2_15 = np.maximum(r2_15, 12.0)  # physiological floor (T2* about 83 ms)
    r2_15[hem] = rng.uniform(52.0, 75.0, hem.sum())
    offset = rng.uniform(-40.0, 40.0, (2, n_subjects))  # per acquisition, per method
    field_true = 12.0 * np.sin(np.deg2rad(segment * 21.0)) + 15.0 * inferolateral + 8.0 * hem
    return {
        "ff": ff_true,
        "r2star": r2star_at(field_s, r2_15),
        "field": field_true * (field_s / 1.5),
        "offset": offset,
    }


def _measured(
    rng: np.random.Generator,
    truth: dict[str, np.ndarray],
    field_s: np.ndarray,
    subj_idx: np.ndarray,
) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray]]:
    """What each method reads (reference, quickmap): the truth with noise, quickmap's fat
    fraction biased and its R2* compressed above the knee; each acquisition's field offset.
    The draws alternate between the methods in this order (the cohort of a seed depends on
    it)."""
    n = len(subj_idx)
    ref_ff = truth["ff"] + rng.normal(0, 0.5, n)
    test_ff = FF_BIAS + FF_SLOPE * truth["ff"] + rng.normal(0, 0.8, n)
    ref_r2 = np.maximum(truth["r2star"] + rng.normal(0, 2.0, n), 0.0)  # fits constrain R2* >= 0
    knee = r2star_at(field_s, np.full(n, R2_KNEE_15T))
    r2_true = truth["r2star"]
    test_r2 = np.where(r2_true > knee, knee + R2_KEEP * (r2_true - knee), r2_true)
    test_r2 = np.maximum(test_r2 + rng.normal(0, 3.0, n), 0.0)
    offset = truth["offset"]
    ref_field = truth["field"] + offset[0, subj_idx] + rng.normal(0, 1.0, n)
    test_field = truth["field"] + offset[1, subj_idx] + rng.normal(0, 2.0, n)
    return (
        {"ff": ref_ff, "r2star": ref_r2, "field": ref_field},
        {"ff": test_ff, "r2star": test_r2, "field": test_field},
    )


def _long(
    subject: np.ndarray, segment: np.ndarray, method: str, values: dict[str, np.ndarray]
) -> pd.DataFrame:
    """One method's values as long rows (ff, r2star, field), rounded to 2 decimals."""
    parts = [
        pd.DataFrame(
            {
                "subject": subject,
                "method": method,
                "segment": segment,
                "parameter": parameter,
                "value": np.round(values[parameter], 2),
            }
        )
        for parameter in ("ff", "r2star", "field")
    ]
    return pd.concat(parts, ignore_index=True)


STUDY_TOML = """\
# Invented demo study: no real subjects, sites or data. Its scenario and planted truth:
# planted_lesions.csv here, and "The demo cohort" in the README of the cohort project.
[study]
title = "Harbour Valley myocardial tissue study (invented demo)"
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


DEMO_FILES = ("values.csv", "subjects.csv", "planted_lesions.csv", "study.toml")
"""The files :func:`write_demo` writes."""


def is_demo_folder(folder: str | Path) -> bool:
    """Whether ``folder`` holds nothing but an earlier demo (its files, and the demo's own
    study file unchanged): the only non-empty folder :func:`write_demo` may write into."""
    folder = Path(folder)
    names = {p.name for p in folder.iterdir()}
    study = folder / "study.toml"
    return (
        names <= set(DEMO_FILES)
        and not any((folder / n).is_symlink() or not (folder / n).is_file() for n in names)
        and study.is_file()
        and study.read_text(encoding="utf-8") == STUDY_TOML
    )


def write_demo(
    folder: str | Path, n_subjects: int = DEMO_SUBJECTS.default, seed: int = DEMO_SEED
) -> Path:
    """Write the demo cohort (values.csv, subjects.csv, planted_lesions.csv, study.toml) to
    ``folder``: a new or empty folder, or one holding an earlier demo (:func:`is_demo_folder`);
    anything else raises :class:`~cohort.report.destination.OutputExistsError`.

    Examples
    --------
    >>> import tempfile
    >>> from pathlib import Path
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     study_file = write_demo(folder, n_subjects=6)
    ...     names = sorted(p.name for p in Path(folder).iterdir())
    >>> study_file.name, names
    ('study.toml', ['planted_lesions.csv', 'study.toml', 'subjects.csv', 'values.csv'])
    """
    from cohort.report.destination import OutputExistsError

    folder = Path(folder)
    if folder.exists() and (not folder.is_dir() or folder.is_symlink()):
        raise OutputExistsError(f"{str(folder)!r} is not a folder")
    if folder.is_dir() and any(folder.iterdir()) and not is_demo_folder(folder):
        raise OutputExistsError(
            f"{str(folder)!r} holds files that are not an earlier cohort demo; give a new folder"
        )
    folder.mkdir(parents=True, exist_ok=True)
    demo = make_demo(n_subjects, seed)
    demo.values.to_csv(folder / "values.csv", index=False)
    demo.subjects.to_csv(folder / "subjects.csv", index=False)
    demo.lesions.to_csv(folder / "planted_lesions.csv", index=False)
    (folder / "study.toml").write_text(STUDY_TOML, encoding="utf-8")
    return folder / "study.toml"
