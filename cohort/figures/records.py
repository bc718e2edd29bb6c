"""What a drawn figure is: its record (key, title, caption, section, files), the figures
skipped with their reason, the set of them, and the file name made from a key.
"""

from __future__ import annotations

import hashlib
import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import pandas as pd
from matplotlib.figure import Figure

from cohort.plots.bullseye_grid import BullseyeGrid

SECTIONS: tuple[str, ...] = ("overview", "agreement", "findings", "groups", "maps")


@dataclass(frozen=True)
class FigureRecord:
    """One saved figure: a stable key (the file stem), title, caption, report section,
    parameter and test method it shows (None when it spans several) and the files written."""

    key: str
    title: str
    caption: str
    section: str
    parameter: str | None
    method: str | None
    paths: tuple[Path, ...]


@dataclass(frozen=True)
class SkippedFigure:
    """A figure of the set that was not drawn, and why."""

    key: str
    reason: str


class FigureSet(list):
    """The records of the figures written (a list of :class:`FigureRecord`), with
    ``skipped``: the figures not drawn, each with its reason."""

    def __init__(self, records: Sequence[FigureRecord], skipped: Sequence[SkippedFigure]):
        super().__init__(records)
        self.skipped: tuple[SkippedFigure, ...] = tuple(skipped)

    def to_frame(self) -> pd.DataFrame:
        """One row per figure, drawn or skipped: key, section, parameter, method, title,
        caption, files, and the reason a figure was skipped (empty when drawn)."""
        rows = [
            {
                "key": r.key,
                "section": r.section,
                "parameter": r.parameter,
                "method": r.method,
                "title": r.title,
                "caption": r.caption,
                "files": "; ".join(p.name for p in r.paths),
                "skipped_reason": "",
            }
            for r in self
        ]
        rows += [
            {
                "key": s.key,
                "section": "",
                "parameter": None,
                "method": None,
                "title": "",
                "caption": "",
                "files": "",
                "skipped_reason": s.reason,
            }
            for s in self.skipped
        ]
        columns = ["key", "section", "parameter", "method", "title", "caption", "files"]
        return pd.DataFrame(rows, columns=[*columns, "skipped_reason"])


@dataclass(frozen=True)
class _Drawn:
    key: str
    title: str
    caption: str
    section: str
    parameter: str | None
    method: str | None
    fig: Figure
    grid: BullseyeGrid | None = None  # what a bullseye grid drew (for inspection in tests)


_Item = _Drawn | SkippedFigure


SLUG_MAX = 40
"""Characters of a name kept in a file name; a longer or altered name gets a hash too."""


def _slug(text: object) -> str:
    """File-name-safe text: letters, digits, dot, minus and underscore kept; others to '-'.

    A name already made of those characters and at most :data:`SLUG_MAX` long is kept as
    it is; any other is cut to :data:`SLUG_MAX` characters and followed by the first 8 hex
    digits of the SHA-256 of the full name, so names that differ only in the characters
    replaced or cut still give distinct file names.
    """
    name = str(text)
    slug = re.sub(r"[^A-Za-z0-9._-]+", "-", name).strip("-.")
    if slug == name and 0 < len(slug) <= SLUG_MAX:
        return slug
    digest = hashlib.sha256(name.encode("utf-8")).hexdigest()[:8]
    return f"{slug[:SLUG_MAX].rstrip('-.')}-{digest}".lstrip("-")
