"""Wording of the figure captions: numbers as text, units, field strengths, thresholds,
and the standard sentences on limits of agreement. A caption is read on its own, so it
names the estimator, the counts and where the statistics with their CIs are.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import pandas as pd

from cohort.analysis.display import FIELD_DEPENDENT_PARAMETERS
from cohort.domain.units import PARAMETERS
from cohort.domain.wording import percent_level
from cohort.figures.layout import _letter
from cohort.figures.tables import CI_METHOD, CONFIDENCE_LEVEL, NOTE, _float, _positive, _text
from cohort.io.study import Study
from cohort.plots.style import fit_label

_LIMITS_TEXT = (
    "bias (solid line) is the mean difference over all pairs and the dashed lines are the "
    "limits of agreement, bias \N{PLUS-MINUS SIGN} 1.96 SD of a single difference, the SD "
    "combining between- and within-subject variance (Bland & Altman 2007, repeated "
    "measurements)"
)
_REGRESSION_TEXT = (
    "bias and limits of agreement are regression-based lines on the mean of the two methods "
    "(Bland & Altman 1999)"
)
_RATIO_TEXT = (
    "the solid line is the geometric mean ratio, exp(mean log ratio), and the dashed lines "
    "the ratio limits of agreement, back-transformed from the limits of the log ratio "
    "(Bland & Altman 2007 on log(test/reference))"
)


def _method_title(study: Study, method: object) -> str:
    """The name a figure shows for a method (panel titles, row labels, captions): its display
    label (``[study.method_labels]``), else its name."""
    return study.method_label(method)


def _panels_text(titles: Sequence[str]) -> str:
    """``"a, quickmap; b, net-full"``: each panel's letter and method, in panel order."""
    return "; ".join(f"{_letter(k)}, {t}" for k, t in enumerate(titles))


def _panel_lead(k: int, title: str, several: bool) -> str:
    """How a caption starts the numbers of panel ``k``: ``"b, quickmap: "`` (no letter for
    a figure of one panel)."""
    return f"{_letter(k)}, {title}: " if several else ""


def _pairs_text(pairs: pd.DataFrame) -> str:
    return f"{len(pairs)} (subject, segment) pairs from {pairs['subject'].nunique()} subjects"


def _interval_text(row: pd.Series, low: str, high: str, unit: str = "") -> str:
    """``"95% CI 0.41 to 0.77 %"``, or why there is none."""
    text = _ci_text(row, low, high, unit)
    if text is not None:
        return f"{_level_text(row)} CI {text}"
    return "CI not estimable" if low in row.index else "no CI in the agreement table"


def _how_text(rows: Sequence[pd.Series], column: str = CI_METHOD) -> str:
    """How the intervals of the rows were obtained, said once when all agree."""
    hows = [_text(r, column) or "method not stated in the agreement table" for r in rows]
    if len(set(hows)) == 1:
        return hows[0]
    return "; ".join(f"{_letter(k)}, {h}" for k, h in enumerate(hows))


def _names_note(names: Sequence[object], where: str) -> str:
    """The full names of the methods drawn shortened in a figure, for its caption."""
    if all(fit_label(n) == str(n) for n in names):
        return ""
    return f" {where}: " + "; ".join(f"'{n}'" for n in names) + "."


def _tesla(b0: float) -> str:
    return f"{b0:g} T"


def _tesla_slug(b0: float) -> str:
    return f"{b0:g}T"


def _unit(parameter: str) -> str:
    return PARAMETERS[parameter].unit


def _label(parameter: str) -> str:
    return PARAMETERS[parameter].label


def _axis(parameter: str) -> str:
    return PARAMETERS[parameter].axis_label


def _number(value: float, unit: str = "", digits: int = 3) -> str:
    """``digits`` significant digits, trailing zeros kept (-2.00, not -2); a true minus."""
    if not math.isfinite(value):
        return "not estimable"
    if value == 0 or 1e-3 <= abs(value) < 10**digits:
        text = f"{value:#.{digits}g}".rstrip(".")
    elif abs(value) >= 10**digits:
        text = f"{value:.0f}"
    else:
        text = f"{value:.2e}"
    text = text.replace("-", "\N{MINUS SIGN}")
    return f"{text} {unit}".strip()


def _short(value: float) -> str:
    """A declared number (a threshold) as given: 50, not 50.0."""
    return f"{value:g}".replace("-", "\N{MINUS SIGN}")


def _level_text(row: pd.Series) -> str:
    level = _float(row, CONFIDENCE_LEVEL)
    return percent_level(level) if math.isfinite(level) else "the table's"


def _ci_text(row: pd.Series, low: str, high: str, unit: str = "") -> str | None:
    lo, hi = _float(row, low), _float(row, high)
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return None
    return f"{_number(lo)} to {_number(hi, unit)}"


def _strength_note(study: Study, parameter: str, frame: pd.DataFrame, split: bool) -> str:
    levels = sorted(float(b) for b in pd.unique(frame["field_strength"]))
    if len(levels) < 2:
        return f" All subjects at {_tesla(levels[0])}." if levels else ""
    listed = " and ".join(_tesla(b) for b in levels)
    if split:
        return f" Shown separately at {listed}, since {_label(parameter)} depends on B0."
    if parameter in FIELD_DEPENDENT_PARAMETERS:
        return (
            f" Subjects at {listed} are pooled; {_label(parameter)} depends on B0, so "
            "part of the spread reflects field strength."
        )
    return f" Subjects at {listed} pooled."


def _counts_text(pairs: pd.DataFrame) -> str:
    return (
        f"{len(pairs)} (subject, segment) pairs from {pairs['subject'].nunique()} subjects "
        "(n in the legend: pairs per group)"
    )


def _bands_text(row: pd.Series, columns: Sequence[str]) -> str:
    values = [_float(row, c) for c in columns]
    method = _text(row, CI_METHOD) or "method not stated in the agreement table"
    if values and all(math.isfinite(v) for v in values):
        return f" Shaded bands: {_level_text(row)} CIs of these lines ({method})."
    note = _text(row, NOTE)
    return " No CI bands: the intervals are not available" + (f" ({note})." if note else ".")


def _threshold_text(rows: pd.DataFrame, parameter: str | None) -> str:
    """Threshold(s) of a finding as read from its rows, with the unit."""
    if "threshold" not in rows.columns:
        return "its threshold"
    unit = f" {_unit(parameter)}" if parameter is not None else ""
    on = f" on {_axis(parameter)}" if parameter is not None else ""
    finite = rows[np.isfinite(rows["threshold"].to_numpy(dtype=float))]
    if finite.empty:
        return "its threshold (not estimable for these rows)"
    side = _direction(finite)
    unique = pd.unique(finite["threshold"])
    if len(unique) == 1:
        return f"{side} a threshold{on} of {_short(float(unique[0]))}{unit}"
    if "field_strength" in finite.columns:
        per = finite.groupby("field_strength")["threshold"].unique()
        if all(len(v) == 1 for v in per):
            parts = [f"{_short(float(v[0]))}{unit} at {_tesla(float(b))}" for b, v in per.items()]
            return f"{side} a threshold{on} of " + ", ".join(parts)
    median = float(np.median(finite["threshold"].to_numpy(dtype=float)))
    return f"{side} subject-specific thresholds{on} (median {_number(median)}{unit})"


def _direction(rows: pd.DataFrame) -> str:
    """ "above" or "below" as the positive rows show it (the table does not say), else
    "beyond" (e.g. a threshold on the absolute value)."""
    if "value" not in rows.columns:
        return "beyond"
    flags = _positive(rows).fillna(False).to_numpy(dtype=bool)
    value = rows["value"].to_numpy(dtype=float)[flags]
    threshold = rows["threshold"].to_numpy(dtype=float)[flags]
    if not value.size:
        return "beyond"
    if (value >= threshold).all():
        return "above"
    if (value <= threshold).all():
        return "below"
    return "beyond"
