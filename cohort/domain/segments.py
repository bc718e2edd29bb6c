"""The AHA myocardial segment models, as data.

Source: Cerqueira MD, Weissman NJ, Dilsizian V, et al. Standardized myocardial
segmentation and nomenclature for tomographic imaging of the heart. A statement for
healthcare professionals from the Cardiac Imaging Committee of the Council on Clinical
Cardiology of the American Heart Association. Circulation 2002;105:539-542.

This module is the only place in the package that knows segment numbers, names, rings,
recommended coronary territories and bullseye angles; everything else imports them.

Angles follow the bullseye of the statement as seen by the viewer: anterior at the top,
septum on the left, lateral on the right, inferior at the bottom; numbering runs
counter-clockwise as seen by the viewer. ``centre_deg`` is measured counter-clockwise from
the 3 o'clock direction (the mathematical convention), so segment 1 is centred at 90 deg.
"""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType

import pandas as pd

RINGS: tuple[str, ...] = ("basal", "mid", "apical", "apex")
"""Rings from the outermost (basal) to the centre (apex) of the bullseye."""

TERRITORIES: tuple[str, ...] = ("LAD", "RCA", "LCx")
"""Coronary territories of the statement's recommended assignment."""

_SIX = ("anterior", "anteroseptal", "inferoseptal", "inferior", "inferolateral", "anterolateral")
_FOUR = ("anterior", "septal", "inferior", "lateral")

# Recommended assignment of the statement (its Figure 2). The statement itself warns of
# large individual variability, greatest at the apex, so a subject may override it.
_TERRITORY = {
    **dict.fromkeys((1, 2, 7, 8, 13, 14, 17), "LAD"),
    **dict.fromkeys((3, 4, 9, 10, 15), "RCA"),
    **dict.fromkeys((5, 6, 11, 12, 16), "LCx"),
}


@dataclass(frozen=True)
class Segment:
    """One myocardial segment of the AHA model."""

    number: int
    ring: str
    wall: str
    territory: str
    centre_deg: float
    width_deg: float

    @property
    def name(self) -> str:
        """Standard name, e.g. ``"basal anteroseptal"``; segment 17 is ``"apex"``."""
        return "apex" if self.ring == "apex" else f"{self.ring} {self.wall}"

    @property
    def short_name(self) -> str:
        """Short label for figures, e.g. ``"bAS"``; the apex is ``"apex"``."""
        if self.ring == "apex":
            return "apex"
        abbreviation = {
            "anterior": "A",
            "anteroseptal": "AS",
            "inferoseptal": "IS",
            "inferior": "I",
            "inferolateral": "IL",
            "anterolateral": "AL",
            "septal": "S",
            "lateral": "L",
        }[self.wall]
        return self.ring[0] + abbreviation


def _build() -> dict[int, Segment]:
    segments: dict[int, Segment] = {}
    for ring, first in (("basal", 1), ("mid", 7)):
        for k, wall in enumerate(_SIX):
            number = first + k
            segments[number] = Segment(
                number, ring, wall, _TERRITORY[number], (90.0 + 60.0 * k) % 360.0, 60.0
            )
    for k, wall in enumerate(_FOUR):
        number = 13 + k
        segments[number] = Segment(
            number, "apical", wall, _TERRITORY[number], (90.0 + 90.0 * k) % 360.0, 90.0
        )
    segments[17] = Segment(17, "apex", "apex", _TERRITORY[17], 0.0, 360.0)
    return segments


SEGMENTS: MappingProxyType[int, Segment] = MappingProxyType(_build())
"""All 17 segments by number."""


@dataclass(frozen=True)
class SegmentModel:
    """A segment model: the 17-segment model or its 16-segment variant without the apex."""

    name: str
    numbers: tuple[int, ...]

    @property
    def segments(self) -> tuple[Segment, ...]:
        return tuple(SEGMENTS[n] for n in self.numbers)

    @property
    def rings(self) -> tuple[str, ...]:
        present = {SEGMENTS[n].ring for n in self.numbers}
        return tuple(r for r in RINGS if r in present)

    def __contains__(self, number: object) -> bool:
        return number in self.numbers

    def to_frame(self) -> pd.DataFrame:
        """One row per segment: number, name, short name, ring, wall, territory, angles."""
        return pd.DataFrame(
            {
                "segment": [s.number for s in self.segments],
                "segment_name": [s.name for s in self.segments],
                "short_name": [s.short_name for s in self.segments],
                "ring": [s.ring for s in self.segments],
                "wall": [s.wall for s in self.segments],
                "territory": [s.territory for s in self.segments],
                "centre_deg": [s.centre_deg for s in self.segments],
                "width_deg": [s.width_deg for s in self.segments],
            }
        )


AHA17 = SegmentModel("aha17", tuple(range(1, 18)))
AHA16 = SegmentModel("aha16", tuple(range(1, 17)))
"""The 16-segment variant: the 17-segment model without segment 17 (apex)."""

MODELS: MappingProxyType[str, SegmentModel] = MappingProxyType({"aha17": AHA17, "aha16": AHA16})


def segment_model(name: str) -> SegmentModel:
    """Return a segment model by name (``"aha17"`` or ``"aha16"``)."""
    try:
        return MODELS[name]
    except KeyError:
        raise ValueError(f"segment model must be one of {sorted(MODELS)}, got {name!r}") from None
