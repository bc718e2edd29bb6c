"""Invented samples for the tests of tests between groups (tests only, not a fixture file)."""

from __future__ import annotations

import numpy as np

ORDER = ("control", "acute", "chronic")


def samples(seed: int = 3, sizes=(11, 9, 14), shifts=(0.0, 0.6, 1.1), scales=(1.0, 2.0, 0.7)):
    """Seeded normal samples rounded to 0.1, so that ties occur."""
    rng = np.random.default_rng(seed)
    return [rng.normal(m, s, n).round(1) for n, m, s in zip(sizes, shifts, scales, strict=True)]
