"""Shared data of the group-comparison tests: summaries in long layout and demo findings."""

from __future__ import annotations

import numpy as np
import pandas as pd

from cohort.analysis.subject_summaries import SUMMARY_COLUMNS

from ..stats.group_data import ORDER

# Cerqueira et al. 2002 recommended territories (DOMAIN.md), written out independently
LAD = (1, 2, 7, 8, 13, 14, 17)
RCA = (3, 4, 9, 10, 15)
LCX = (5, 6, 11, 12, 16)


def long_frame(arrays, labels=ORDER, parameter="ff", method="m", summary="mean"):
    """Per-subject summaries (one per value of ``arrays``) in the layout of SUMMARY_COLUMNS."""
    rows = []
    for g, a in zip(labels, arrays, strict=True):
        for i, v in enumerate(a):
            rows.append((f"{g}-{i}", g, method, parameter, summary, float(v), 17, ""))
    return pd.DataFrame(rows, columns=list(SUMMARY_COLUMNS))


def demo_findings(values: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Per segment: hemorrhage (R2* > 50 1/s at 1.5 T, > 79 1/s at 3 T: O'Regan 2009 and
    the Storey 2007 scaling, DOMAIN.md) and |field| > 20 Hz (an invented finding present in
    every group, so that GEE is estimable); per subject: any positive segment."""
    r2 = values[values["parameter"].eq("r2star")]
    cut = np.where(r2["field_strength"] > 2.0, 79.0, 50.0)
    fld = values[values["parameter"].eq("field")]
    cols = ["subject", "group", "method", "segment"]
    segment = pd.concat(
        [
            r2[cols].assign(finding="hemorrhage", positive=r2["value"].to_numpy() > cut),
            fld[cols].assign(finding="field shift", positive=fld["value"].abs().to_numpy() > 20),
        ],
        ignore_index=True,
    )
    subject = segment.groupby(["subject", "group", "method", "finding"], as_index=False)[
        "positive"
    ].any()
    return segment, subject
