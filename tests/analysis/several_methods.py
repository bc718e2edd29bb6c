"""An invented cohort with one reference and four test methods of R2*, with planted lesions:
each method's detections, misses and false positives are known by construction.

All subjects are at 1.5 T, where the hemorrhage threshold is R2* > 50 1/s (T2* < 20 ms;
common practice, O'Regan et al. 2009 (memory)). Healthy myocardium reads about 25 1/s
(Storey et al. 2007: about 23 1/s at 1.5 T), far below the threshold for every method, so
the only positive segments are the planted ones.

Methods (names as in the values table; they first appear in the order of ``APPEARANCE``):

- ``good``: agrees everywhere (within +/- 1 1/s): every lesion detected;
- ``deceptive``: reads small lesions (reference below 100 1/s) just under the threshold and
  large ones correctly: high overall CCC, half of the lesions missed;
- ``poor``: scattered (+/- 15 1/s in healthy segments) and reads three lesions in four as
  healthy: low CCC and low sensitivity;
- ``overcall``: agrees on lesions but reads ``OVERCALLED`` healthy segments as 60 1/s
  (false positives).
"""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import pandas as pd

REFERENCE = "ref"
TESTS = ("good", "deceptive", "poor", "overcall")
APPEARANCE = ("overcall", REFERENCE, "deceptive", "good", "poor")
"""Order in which the methods first appear in the values table (neither the study order
nor alphabetical)."""
STUDY_ORDER = ("good", "poor", "overcall", "deceptive")
"""The order ``[study] methods`` gives in :func:`write_study`."""
LABELS = {"good": "Method G", "deceptive": "Method D", "poor": "Method P", "overcall": "Method O"}

SUBJECTS = [f"p{i:02d}" for i in range(1, 13)]
GROUP = {s: ("acute" if i < 8 else "control") for i, s in enumerate(SUBJECTS)}

# (subject, segment): reference R2* in 1/s. Twelve small lesions (55-90 1/s, below 100) and
# twelve large ones (120-230 1/s), in subjects p01-p08.
SMALL = {
    ("p01", 3): 55.0, ("p01", 4): 60.0, ("p02", 9): 65.0, ("p02", 10): 70.0,
    ("p03", 15): 58.0, ("p04", 3): 75.0, ("p04", 9): 80.0, ("p05", 4): 85.0,
    ("p06", 10): 90.0, ("p07", 3): 62.0, ("p07", 15): 68.0, ("p08", 9): 72.0,
}  # fmt: skip
LARGE = {
    ("p01", 9): 120.0, ("p02", 3): 150.0, ("p02", 4): 180.0, ("p03", 9): 200.0,
    ("p03", 10): 230.0, ("p04", 4): 140.0, ("p05", 3): 160.0, ("p05", 9): 210.0,
    ("p06", 4): 170.0, ("p06", 15): 190.0, ("p07", 9): 130.0, ("p08", 10): 220.0,
}  # fmt: skip
LESIONS = {**SMALL, **LARGE}

POOR_FOUND = {("p03", 15), ("p03", 9), ("p03", 10), ("p08", 9), ("p08", 10), ("p02", 3)}
"""The only lesions ``poor`` detects (6 of 24: every lesion of p03 and p08, one of p02); it
reads the others as about 35 1/s."""
OVERCALLED = {
    ("p09", 1), ("p09", 2), ("p10", 5), ("p10", 6), ("p11", 7), ("p11", 8),
    ("p12", 11), ("p12", 12), ("p01", 1), ("p02", 2), ("p03", 6), ("p04", 12),
}  # fmt: skip
"""Healthy segments ``overcall`` reads as 60 1/s: 12 false positives against 24 lesions."""


def detected(method: str) -> set[tuple[str, int]]:
    """The planted lesions ``method`` shows above the threshold (by construction)."""
    return {
        "good": set(LESIONS),
        "deceptive": set(LARGE),
        "poor": set(POOR_FOUND),
        "overcall": set(LESIONS),
    }[method]


def false_positives(method: str) -> set[tuple[str, int]]:
    """Healthy segments ``method`` shows above the threshold (by construction)."""
    return set(OVERCALLED) if method == "overcall" else set()


def _test_value(method: str, key: tuple[str, int], ref: float, rng) -> float:
    lesion = key in LESIONS
    if method == "good":
        return ref + rng.uniform(-1.0, 1.0)
    if method == "deceptive":
        if lesion and key in SMALL:
            return 46.0 + rng.uniform(-2.0, 2.0)  # just under 50: missed
        return ref + rng.uniform(-1.0, 1.0)
    if method == "poor":
        if lesion:
            return ref if key in POOR_FOUND else 35.0 + rng.uniform(-5.0, 5.0)
        return ref + rng.uniform(-15.0, 15.0)  # healthy: at most 31 + 15 < 50
    if key in OVERCALLED:
        return 60.0
    return ref + rng.uniform(-1.0, 1.0)


def planted_frames(seed: int = 20261202) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(values, subjects): the long values table (R2* only) and the subjects table."""
    rng = np.random.default_rng(seed)
    reference = {
        (s, seg): LESIONS.get((s, seg), 25.0 + rng.uniform(-6.0, 6.0))
        for s in SUBJECTS
        for seg in range(1, 18)
    }
    rows = []
    for method in APPEARANCE:
        for (s, seg), ref in reference.items():
            value = ref if method == REFERENCE else _test_value(method, (s, seg), ref, rng)
            rows.append((s, method, seg, "r2star", round(float(value), 3)))
    values = pd.DataFrame(rows, columns=["subject", "method", "segment", "parameter", "value"])
    subjects = pd.DataFrame(
        {
            "subject": SUBJECTS,
            "group": [GROUP[s] for s in SUBJECTS],
            "field_strength": 1.5,
        }
    )
    return values, subjects


def write_study(
    folder: Path,
    *,
    methods: tuple[str, ...] | None = STUDY_ORDER,
    labels: dict[str, str] | None = None,
    extra: str = "",
) -> Path:
    """Write ``values.csv``, ``subjects.csv`` and ``study.toml`` to ``folder``; return the
    study file. ``methods`` is ``[study] methods`` (None: not given), ``labels``
    ``[study.method_labels]`` (default :data:`LABELS`), ``extra`` more TOML."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    values, subjects = planted_frames()
    values.to_csv(folder / "values.csv", index=False)
    subjects.to_csv(folder / "subjects.csv", index=False)
    lines = [
        "[study]",
        'title = "Invented cohort with four test methods"',
        'values = "values.csv"',
        'subjects = "subjects.csv"',
        f'reference = "{REFERENCE}"',
        'groups = ["control", "acute"]',
    ]
    if methods is not None:
        lines.append("methods = [" + ", ".join(f'"{m}"' for m in methods) + "]")
    lines.append("[study.method_labels]")
    lines += [f'{m} = "{text}"' for m, text in (LABELS if labels is None else labels).items()]
    path = folder / "study.toml"
    path.write_text("\n".join(lines) + "\n" + textwrap.dedent(extra), encoding="utf-8")
    return path
