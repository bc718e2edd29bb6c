"""An invented demo cohort with a planted truth (for the demo, tutorials and benchmarks only).

Scenario (invented; no real people, sites or data): the "Harbour Valley myocardial tissue
study" scans healthy volunteers and patients after myocardial infarction on two scanners,
one at 1.5 T and one at 3 T. Each heart is analysed with the study's reference multi-echo
fit (``reference-fit``) and with three test methods of decreasing input, in this display
order: a network given all complex echoes (``net-full``), a fast fit of three echoes
(``quickmap``) and a network given one magnitude echo (``net-mag1``).

Planted truth (what a correct analysis must recover; the constants are at the top of this
module, :data:`PLANTED` for the test methods):

- truth: normal myocardial fat fraction about 0.8 % (SD 0.5, cut at 0); normal R2* 23 1/s
  at 1.5 T (segment SD 2.5, subject SD 4, inferolateral segments 5 1/s more), at 3 T
  1.88 x R2*(1.5 T) - 15 1/s (Storey et al. 2007); the field varies around the ring and is
  higher inferolaterally and in hemorrhage (Hz, scaled with B0);
- lesions: acute patients have hemorrhage (true R2* 52-75 1/s at 1.5 T) in 1-4 segments of
  the culprit territory; chronic patients have fatty replacement (8-25 % fat) in 1-4 such
  segments;
- reference-fit: the truth plus noise, SD 0.5 pp (fat fraction), 2 1/s (R2*), 1 Hz (field);
- net-full (adequate): fat fraction = 0.2 + truth (pp), noise SD 0.6 pp; R2* the truth
  with noise SD 3 1/s (no compression: hemorrhage is found); field noise SD 2 Hz;
- quickmap (agrees well overall, misses hemorrhage): fat fraction = 0.5 + 1.05 x truth
  (pp), noise SD 0.8 pp; R2* compressed: above 45 1/s (1.5 T; 3 T: 1.88 x 45 - 15 = 69.6
  1/s) it keeps only 35 % of the excess, so hemorrhage with a true R2* below about 59 1/s at
  1.5 T (96.5 1/s at 3 T) falls under the 50 (79) 1/s threshold and is missed (about a
  third of hemorrhagic segments); elsewhere it agrees (noise SD 3 1/s). Subjects differ in
  normal R2*, which keeps the overall concordance high while lesions are missed; field
  noise SD 2 Hz; no apex (segment 17) value in one subject in eight;
- net-mag1 (poor; magnitude-only, so its fat fraction is confined to 0-50 %): fat fraction
  = -1.5 + 0.8 x truth (pp), noise SD 2.8 pp, cut to 0-50 % (it reads fatty segments low
  and misses about a third of them; near zero the cut at 0 offsets its low reading); R2*
  strongly compressed: above 40 1/s (1.5 T; 3 T: 60.2 1/s) it keeps only 10 % of the
  excess, noise SD 8 1/s, so both its overall concordance (CCC below 0.8) and its
  hemorrhage sensitivity (about 0.1) are low; field noise SD 6 Hz;
- field: every method reads the truth up to noise after per-subject referencing; each
  acquisition has its own arbitrary offset (uniform -40 to 40 Hz) that referencing must
  remove.

The reference and quickmap (and the subjects and lesions) come from one generator seeded
with ``seed``, in a fixed order; each other test method draws from its own generator
(``numpy.random.default_rng([seed, 1, k])``), so a cohort's reference and quickmap values do
not depend on which other methods are asked for.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType
from typing import NamedTuple

import numpy as np
import pandas as pd

from cohort.domain.segments import SEGMENTS

REFERENCE = "reference-fit"
NET_FULL, QUICKMAP, NET_MAG1 = "net-full", "quickmap", "net-mag1"
TEST = QUICKMAP
"""The test method of the one-method demo (``test_methods=(TEST,)``, used by benchmarks)."""
DEMO_TEST_METHODS: tuple[str, ...] = (NET_FULL, QUICKMAP, NET_MAG1)
"""The demo's test methods in display order (``[study] methods``)."""
METHOD_LABELS = MappingProxyType(
    {
        NET_FULL: "Network, all echoes",
        QUICKMAP: "Fast three-echo fit",
        NET_MAG1: "Network, one magnitude echo",
    }
)
"""Display labels of the test methods (``[study.method_labels]``)."""
GROUPS = ("control", "acute", "chronic")


@dataclass(frozen=True)
class Planted:
    """What one test method reads given the truth (see the module docstring).

    Fat fraction ``ff_bias + ff_slope x truth`` plus noise (pp; cut to 0-50 % when
    ``magnitude_only``); R2* above the knee (``r2_knee_15t`` at 1.5 T, scaled to 3 T as
    Storey et al. 2007; infinite: no compression) keeps ``r2_keep`` of the excess, plus
    noise (1/s); field plus noise (Hz). Noise SDs are ``*_sd``.
    """

    ff_bias: float
    ff_slope: float
    ff_sd: float
    r2_knee_15t: float
    r2_keep: float
    r2_sd: float
    field_sd: float
    magnitude_only: bool = False


PLANTED = MappingProxyType(
    {
        NET_FULL: Planted(0.2, 1.0, 0.6, math.inf, 1.0, 3.0, 2.0),
        QUICKMAP: Planted(0.5, 1.05, 0.8, 45.0, 0.35, 3.0, 2.0),
        NET_MAG1: Planted(-1.5, 0.8, 2.8, 40.0, 0.10, 8.0, 6.0, magnitude_only=True),
    }
)
"""The planted truth of each test method, in display order."""
REFERENCE_SD = MappingProxyType({"ff": 0.5, "r2star": 2.0, "field": 1.0})
"""Noise SD of the reference (pp, 1/s, Hz)."""
NORMAL_R2STAR_15T = MappingProxyType({"mean": 23.0, "segment_sd": 2.5, "subject_sd": 4.0})
"""Normal myocardial R2* at 1.5 T (1/s; Storey et al. 2007), with its spread between
segments and between subjects; inferolateral segments (5, 11) read 5 1/s more."""
HEMORRHAGE_R2STAR_15T = (52.0, 75.0)
"""True R2* of hemorrhagic segments at 1.5 T (1/s, uniform; acute patients)."""
FATTY_FF = (8.0, 25.0)
"""True fat fraction of fatty segments (%, uniform; chronic patients)."""
LESIONS_PER_PATIENT = (1, 4)
"""Lesion segments per patient, all in the culprit territory (uniform)."""
FIELD_OFFSET_HZ = 40.0
"""Each acquisition's arbitrary field offset is uniform in -40 to 40 Hz."""
NO_APEX_EVERY = 8
"""quickmap has no apex (segment 17) value in one subject in this many."""
_OWN_STREAM = MappingProxyType({NET_FULL: 1, NET_MAG1: 2})
"""``k`` of each method drawn from its own generator ``default_rng([seed, 1, k])``."""


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


def _checked_methods(test_methods: Sequence[str]) -> tuple[str, ...]:
    """``test_methods`` as a tuple, or a ValueError naming the rule broken."""
    if isinstance(test_methods, str) or not isinstance(test_methods, Sequence):
        raise ValueError(f"test_methods must be a sequence of method names, got {test_methods!r}")
    methods = tuple(test_methods)
    unknown = [m for m in methods if m not in PLANTED]
    if not methods or unknown or len(set(methods)) != len(methods):
        raise ValueError(
            f"test_methods must name one or more distinct demo methods of {list(PLANTED)}, "
            f"got {list(methods)}"
        )
    return methods


def make_demo(
    n_subjects: int = DEMO_SUBJECTS.default,
    seed: int = DEMO_SEED,
    *,
    test_methods: Sequence[str] = DEMO_TEST_METHODS,
) -> DemoCohort:
    """Generate the invented cohort (vectorised: 100,000 subjects take seconds).

    Values rows: the reference first, then quickmap (when asked), then the other test
    methods in the order of ``test_methods``. ``test_methods=("quickmap",)`` gives the
    one-method cohort of earlier versions, value for value.

    Examples
    --------
    >>> demo = make_demo(6)
    >>> len(demo.subjects), len(demo.values), sorted(set(demo.lesions["kind"]))
    (6, 1224, ['fat', 'hemorrhage'])
    >>> list(demo.values["method"].unique())
    ['reference-fit', 'quickmap', 'net-full', 'net-mag1']
    >>> len(make_demo(6, test_methods=("quickmap",)).values)
    612
    """
    methods = _checked_methods(test_methods)
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
    truth = _truth(rng, segment, field_s, subj_idx, hem, fat)
    reference, quickmap = _measured(rng, truth, field_s, subj_idx)
    read = {QUICKMAP: quickmap}
    for method in methods:
        if method != QUICKMAP:  # after every draw of the main generator
            own = np.random.default_rng([seed, 1, _OWN_STREAM[method]])
            read[method] = _read_own(own, PLANTED[method], truth, field_s, subj_idx)
    order = sorted(methods, key=lambda m: m != QUICKMAP)  # today's rows first (stable sort)
    values = pd.concat(
        [_long(ids[subj_idx], segment, REFERENCE, reference)]
        + [_long(ids[subj_idx], segment, m, read[m]) for m in order],
        ignore_index=True,
    )
    values["value"] = values["value"].astype(object)
    # Series.isin hashes; np.isin on text compares pair by pair (minutes at 100,000 subjects)
    no_apex = (
        values["subject"].isin(ids[::NO_APEX_EVERY])
        & values["method"].eq(QUICKMAP)
        & values["segment"].eq(17)
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
        chosen = rng.choice(
            segs,
            size=rng.integers(LESIONS_PER_PATIENT[0], LESIONS_PER_PATIENT[1] + 1),
            replace=False,
        )
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
    arbitrary field offset (``offset``: rows for the reference and quickmap)."""
    n, n_subjects = len(segment), int(subj_idx.max(initial=-1)) + 1
    inferolateral = np.isin(segment, (5, 11))
    ff_true = np.clip(rng.normal(0.8, 0.5, n), 0.0, None)
    ff_true[fat] = rng.uniform(*FATTY_FF, fat.sum())
    normal = NORMAL_R2STAR_15T
    r2_15 = (
        rng.normal(normal["mean"], normal["segment_sd"], n)
        + 5.0 * inferolateral
        + rng.normal(0.0, normal["subject_sd"], n_subjects)[subj_idx]
    )
    r2_15 = np.maximum(r2_15, 12.0)  # physiological floor (T2* about 83 ms)
    r2_15[hem] = rng.uniform(*HEMORRHAGE_R2STAR_15T, hem.sum())
    # one offset per acquisition: row 0 the reference, row 1 quickmap
    offset = rng.uniform(-FIELD_OFFSET_HZ, FIELD_OFFSET_HZ, (2, n_subjects))
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
    """What the reference and quickmap read (each acquisition with its field offset, rows
    0 and 1 of ``truth["offset"]``). The noise draws alternate between the two methods in
    this order (the cohort of a seed depends on it)."""
    n = len(subj_idx)
    sd, quick = REFERENCE_SD, PLANTED[QUICKMAP]
    ref_ff = truth["ff"] + rng.normal(0, sd["ff"], n)
    noise_ff = rng.normal(0, quick.ff_sd, n)
    # fits constrain R2* >= 0
    ref_r2 = np.maximum(truth["r2star"] + rng.normal(0, sd["r2star"], n), 0.0)
    noise_r2 = rng.normal(0, quick.r2_sd, n)
    offset = truth["offset"]
    ref_field = truth["field"] + offset[0, subj_idx] + rng.normal(0, sd["field"], n)
    noise_field = rng.normal(0, quick.field_sd, n)
    test = _reading(quick, truth, field_s, (noise_ff, noise_r2, noise_field), offset[1, subj_idx])
    return {"ff": ref_ff, "r2star": ref_r2, "field": ref_field}, test


def _read_own(
    rng: np.random.Generator,
    planted: Planted,
    truth: dict[str, np.ndarray],
    field_s: np.ndarray,
    subj_idx: np.ndarray,
) -> dict[str, np.ndarray]:
    """What a test method with its own generator reads: its acquisition's field offset, then
    its noise of fat fraction, R2* and field, in this order."""
    n, n_subjects = len(subj_idx), int(subj_idx.max(initial=-1)) + 1
    offset = rng.uniform(-FIELD_OFFSET_HZ, FIELD_OFFSET_HZ, n_subjects)
    noise = (
        rng.normal(0, planted.ff_sd, n),
        rng.normal(0, planted.r2_sd, n),
        rng.normal(0, planted.field_sd, n),
    )
    return _reading(planted, truth, field_s, noise, offset[subj_idx])


def _reading(
    planted: Planted,
    truth: dict[str, np.ndarray],
    field_s: np.ndarray,
    noise: tuple[np.ndarray, np.ndarray, np.ndarray],
    offset: np.ndarray,
) -> dict[str, np.ndarray]:
    """A test method's values from the truth, its noise (ff, R2*, field) and its field
    offset per row: fat fraction biased (cut to 0-50 % if magnitude-only), R2* compressed
    above the knee and kept >= 0, field offset."""
    noise_ff, noise_r2, noise_field = noise
    ff = planted.ff_bias + planted.ff_slope * truth["ff"] + noise_ff
    if planted.magnitude_only:  # cannot tell f from 100 - f (Hussain et al. 2005 (memory))
        ff = np.clip(ff, 0.0, 50.0)
    r2_true = truth["r2star"]
    if math.isfinite(planted.r2_knee_15t):
        knee = r2star_at(field_s, np.full(len(r2_true), planted.r2_knee_15t))
        r2_true = np.where(r2_true > knee, knee + planted.r2_keep * (r2_true - knee), r2_true)
    r2 = np.maximum(r2_true + noise_r2, 0.0)
    field = truth["field"] + offset + noise_field
    return {"ff": ff, "r2star": r2, "field": field}


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


_STUDY_HEAD = """\
# Invented demo study: no real subjects, sites or data. Its scenario and planted truth:
# planted_lesions.csv here, and "The demo cohort" in the README of the cohort project.
[study]
title = "Harbour Valley myocardial tissue study (invented demo)"
values = "values.csv"
subjects = "subjects.csv"
reference = "reference-fit"
segment_model = "aha17"
groups = ["control", "acute", "chronic"]
"""

_STUDY_TAIL = """
[study.group_labels]
control = "Healthy volunteers"
acute = "Acute infarction"
chronic = "Chronic infarction"

[units]
ff = "percent"
field = "Hz"

[field]
referencing = "subject-median"
{findings}
[acceptance]
# Criteria set in advance (invented for the demo; a real study states and justifies its own)
[acceptance.limits]      # largest acceptable difference, in the parameter's unit
ff = 3.0                 # percentage points
r2star = 15.0            # 1/s
field = 10.0             # Hz
[acceptance.findings]    # smallest acceptable segment-level sensitivity
hemorrhage = 0.8
fat = 0.8
"""


def study_toml(test_methods: Sequence[str] = DEMO_TEST_METHODS) -> str:
    """The demo's study file for a cohort of ``test_methods`` (:func:`make_demo`): their
    order and labels, magnitude-only methods for the swap screen, the acceptance criteria.

    Examples
    --------
    >>> import tomllib
    >>> study = tomllib.loads(study_toml(("quickmap",)))["study"]
    >>> study["methods"], study["method_labels"]
    (['quickmap'], {'quickmap': 'Fast three-echo fit'})
    """
    methods = _checked_methods(test_methods)
    labels = "".join(f'{m} = "{METHOD_LABELS[m]}"\n' for m in methods)
    magnitude = [m for m in methods if PLANTED[m].magnitude_only]
    findings = (
        "\n[findings]\n# swap screen: fat fractions of a magnitude-only method lie in 0-50 %\n"
        f"magnitude_only_methods = {_toml_list(magnitude)}\n"
        if magnitude
        else ""
    )
    return (
        f"{_STUDY_HEAD}methods = {_toml_list(methods)}\n\n[study.method_labels]\n{labels}"
        + _STUDY_TAIL.format(findings=findings)
    )


def _toml_list(names: Sequence[str]) -> str:
    """A TOML array of plain names (letters, digits, hyphens: nothing to escape)."""
    return "[" + ", ".join(f'"{name}"' for name in names) + "]"


STUDY_TOML = study_toml()
"""The demo's study file (three test methods)."""


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
        and study.read_text(encoding="utf-8") in (STUDY_TOML, study_toml((TEST,)))
    )


def write_demo(
    folder: str | Path,
    n_subjects: int = DEMO_SUBJECTS.default,
    seed: int = DEMO_SEED,
    *,
    test_methods: Sequence[str] = DEMO_TEST_METHODS,
) -> Path:
    """Write the demo cohort (values.csv, subjects.csv, planted_lesions.csv, study.toml) to
    ``folder``: a new or empty folder, or one holding an earlier demo (:func:`is_demo_folder`);
    anything else raises :class:`~cohort.report.destination.OutputExistsError`. ``test_methods``
    chooses the test methods (:func:`make_demo`; tests and benchmarks use the one-method demo).

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
    demo = make_demo(n_subjects, seed, test_methods=test_methods)
    demo.values.to_csv(folder / "values.csv", index=False)
    demo.subjects.to_csv(folder / "subjects.csv", index=False)
    demo.lesions.to_csv(folder / "planted_lesions.csv", index=False)
    (folder / "study.toml").write_text(study_toml(test_methods), encoding="utf-8")
    return folder / "study.toml"
