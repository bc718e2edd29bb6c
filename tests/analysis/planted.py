"""A simulated cohort with planted lesions (R2*, reference ``ref``, test ``fast``): detected,
missed and extra segments, one unpaired segment. Shared by the finding-agreement and alerts
tests."""

from __future__ import annotations

import numpy as np
import pandas as pd

from cohort.domain.segments import SEGMENTS

SUBJECTS = [f"s{i:02d}" for i in range(1, 9)]
GROUP = {s: ("acute" if i < 4 else "control") for i, s in enumerate(SUBJECTS)}
FIELD = {s: (3.0 if s in ("s03", "s07") else 1.5) for s in SUBJECTS}

# (subject, segment): (reference R2*, test R2*) in 1/s; thresholds 50 at 1.5 T and 79 at 3 T
# (common practice; 3 T derived with Storey et al. 2007)
DETECTED = {
    ("s01", 3): (80, 75),
    ("s01", 4): (82, 70),
    ("s02", 9): (90, 88),
    ("s03", 10): (100, 90),
}
MISSED = {("s01", 5): (60, 45), ("s04", 15): (55, 48), ("s03", 16): (85, 75)}
EXTRA = {("s06", 7): (30, 55), ("s02", 1): (40, 52)}
UNPAIRED = ("s02", 12)  # reference positive (90 1/s), no test value: neither missed nor counted


def planted_values(seed: int = 11) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rows = []
    for s in SUBJECTS:
        for seg, info in SEGMENTS.items():
            ref = 25.0 + rng.normal(0, 2)
            test = ref + rng.normal(0, 1)
            for planted in (DETECTED, MISSED, EXTRA):
                if (s, seg) in planted:
                    ref, test = planted[(s, seg)]
            if (s, seg) == UNPAIRED:
                ref = 90.0
            for method, value in (("ref", ref), ("fast", test)):
                if method == "fast" and (s, seg) == UNPAIRED:
                    continue
                rows.append(
                    {
                        "subject": s,
                        "method": method,
                        "segment": seg,
                        "parameter": "r2star",
                        "value": float(value),
                        "group": GROUP[s],
                        "field_strength": FIELD[s],
                        "segment_name": info.name,
                        "ring": info.ring,
                        "territory": info.territory,
                    }
                )
    return pd.DataFrame(rows)


def planted_subjects() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "subject": SUBJECTS,
            "group": [GROUP[s] for s in SUBJECTS],
            "field_strength": [FIELD[s] for s in SUBJECTS],
            "culprit_territory": ["RCA", "RCA", "RCA", "RCA", "", "", "", ""],
        }
    )


def planted_paired(values: pd.DataFrame) -> pd.DataFrame:
    ref = values[values["method"].eq("ref")].drop(columns="method")
    test = values[values["method"].eq("fast")][["subject", "segment", "parameter", "value"]]
    paired = test.merge(ref, on=["subject", "segment", "parameter"], suffixes=("", "_ref"))
    paired = paired.rename(columns={"value": "test_value", "value_ref": "reference_value"})
    paired["method"], paired["reference"] = "fast", "ref"
    return paired
