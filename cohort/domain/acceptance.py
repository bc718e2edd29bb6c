"""Acceptance criteria set in advance: when is a test method good enough?

Bland & Altman (Stat Methods Med Res 1999; 8:135-160) ask that the limits of agreement be
compared with a clinically acceptable difference decided before the data are seen. The study
file's ``[acceptance]`` table declares such criteria (all optional)::

    [acceptance]
    baseline = "net-full"        # head-to-head: every other method against this one
                                 # (default: every pair of test methods)
    [acceptance.limits]          # largest acceptable difference, in the report's unit
    ff = 3.0                     #   (fat fraction: percentage points; R2*: 1/s; field: Hz);
    r2star = 15.0                #   both limits of agreement must lie within -L to +L
    [acceptance.findings]        # smallest acceptable segment-level sensitivity (0-1]
    hemorrhage = 0.8
    [acceptance.ccc]             # smallest acceptable Lin's CCC per parameter (0-1]
    ff = 0.9

A verdict uses the estimate's confidence interval (rules in :data:`VERDICT_RULES`): it
*meets* a criterion when the whole interval is on the acceptable side (for limits of
agreement: the outer confidence bounds of both limits within +/-L, as Stöckl, Rodríguez
Cabaleiro, Van Uytfanghe & Thienpont, Clin Chem 2004; 50:2216-2218 (memory) propose),
*fails* when the estimate itself is on the wrong side, and is *inconclusive* otherwise.

Without a sensitivity criterion the missed-lesion alert uses
:data:`DEFAULT_MIN_SENSITIVITY` (a convention of this package, not a validated standard).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

DEFAULT_MIN_SENSITIVITY = 0.8
"""Segment-level sensitivity below which a method is said to miss lesions when the study
declares no criterion for the finding (a convention of this package: four in five lesions
the reference shows; studies should declare their own)."""
DEFAULT_MIN_PPV = 0.8
"""Positive predictive value below which a method is said to over-call a finding (a
convention of this package, like :data:`DEFAULT_MIN_SENSITIVITY`)."""

MEETS, FAILS, INCONCLUSIVE, NOT_ASSESSED = "meets", "fails", "inconclusive", "not-assessed"
VERDICTS = (MEETS, FAILS, INCONCLUSIVE, NOT_ASSESSED)
"""The words of a verdict, best first (tables, overview and figures use these words)."""

VERDICT_RULES: MappingProxyType[str, str] = MappingProxyType(
    {
        MEETS: "the whole confidence interval is on the acceptable side of the criterion",
        FAILS: "the estimate is on the wrong side of the criterion",
        INCONCLUSIVE: "the estimate is acceptable but the interval crosses the criterion "
        "(or no interval could be computed)",
        NOT_ASSESSED: "no criterion was declared",
    }
)
"""What each verdict means, as the methods text states it."""

STATISTICS: MappingProxyType[str, str] = MappingProxyType(
    {
        "loa_low": "lower limit of agreement",
        "loa_high": "upper limit of agreement",
        "ccc": "Lin's concordance correlation coefficient",
        "sensitivity": "segment-level sensitivity",
    }
)
"""The statistics a verdict is given for, in the order of the verdicts table."""


@dataclass(frozen=True)
class Acceptance:
    """The ``[acceptance]`` table: criteria set in advance (see the module docstring).

    ``limits`` maps a parameter code to the largest acceptable difference L (canonical unit);
    ``findings`` a finding name to the smallest acceptable sensitivity; ``ccc`` a parameter
    code to the smallest acceptable CCC; ``baseline`` the method the others are compared with
    head to head (None: every pair).

    Examples
    --------
    >>> a = Acceptance(limits={"ff": 3.0}, findings={"hemorrhage": 0.8})
    >>> a.declared, a.min_sensitivity("hemorrhage"), a.min_sensitivity("fat")
    (True, 0.8, 0.8)
    >>> Acceptance().declared
    False
    """

    limits: Mapping[str, float] = field(default_factory=dict)
    findings: Mapping[str, float] = field(default_factory=dict)
    ccc: Mapping[str, float] = field(default_factory=dict)
    baseline: str | None = None

    @property
    def declared(self) -> bool:
        """Whether any criterion is declared (a verdicts table is made only then)."""
        return bool(self.limits or self.findings or self.ccc)

    def min_sensitivity(self, finding: str) -> float:
        """The sensitivity below which a method misses lesions of ``finding``: the declared
        criterion, else :data:`DEFAULT_MIN_SENSITIVITY`."""
        return float(self.findings.get(finding, DEFAULT_MIN_SENSITIVITY))

    def to_dict(self) -> dict[str, Any]:
        return {
            "limits": dict(self.limits),
            "findings": dict(self.findings),
            "ccc": dict(self.ccc),
            "baseline": self.baseline,
        }


def verdict(estimate: float, low: float, high: float, criterion: float, *, upper: bool) -> str:
    """The verdict of one estimate with its interval ``(low, high)`` against ``criterion``.

    ``upper=True``: acceptable values lie at or below the criterion (an upper limit of
    agreement against +L); ``upper=False``: at or above it (a lower limit against -L, a CCC
    or a sensitivity against its minimum). Rules: :data:`VERDICT_RULES`; an interval that
    is not finite gives at best ``inconclusive``; a NaN estimate gives ``inconclusive``.

    Examples
    --------
    >>> verdict(2.1, 1.8, 2.5, 3.0, upper=True), verdict(2.1, 1.8, 3.2, 3.0, upper=True)
    ('meets', 'inconclusive')
    >>> verdict(0.75, 0.6, 0.85, 0.8, upper=False)
    'fails'
    """
    nan = estimate != estimate
    if nan:
        return INCONCLUSIVE
    if (estimate > criterion) if upper else (estimate < criterion):
        return FAILS
    finite = all(abs(b) < float("inf") for b in (low, high))  # False for NaN too
    if not finite:
        return INCONCLUSIVE
    bound = high if upper else low
    ok = bound <= criterion if upper else bound >= criterion
    return MEETS if ok else INCONCLUSIVE
