"""Parameters, their units and the conversions between units: the one place for these facts.

Canonical units inside the package: fat fraction in percent, R2* in 1/s, field in Hz.

- R2* = 1 / T2*; with T2* in ms, R2* [1/s] = 1000 / T2* [ms] (definition).
- Field: ppm to Hz by f [Hz] = ppm * 1e-6 * gamma_bar * B0, with the proton gyromagnetic ratio
  gamma_bar = 42.577478 MHz/T (CODATA 2018, gamma_p / 2 pi = 42.577 478 518 MHz/T).
"""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType

import numpy as np

PROTON_GAMMA_BAR_MHZ_PER_T = 42.577478518
"""Proton gyromagnetic ratio over 2 pi in MHz/T (CODATA 2018)."""


@dataclass(frozen=True)
class Parameter:
    """A measured quantity: its code in the input, label, canonical unit."""

    code: str
    label: str
    unit: str
    description: str

    @property
    def axis_label(self) -> str:
        """Quantity and unit, e.g. ``"fat fraction (%)"``, for figure axes and table heads."""
        return f"{self.label} ({self.unit})"


PARAMETERS: MappingProxyType[str, Parameter] = MappingProxyType(
    {
        "ff": Parameter("ff", "fat fraction", "%", "proton density fat fraction (PDFF)"),
        "r2star": Parameter("r2star", "R2*", "1/s", "transverse relaxation rate R2*"),
        "field": Parameter("field", "field", "Hz", "off-resonance field, referenced per subject"),
    }
)
"""Analysed parameters by code, in canonical units. T2* inputs become ``r2star``."""

INPUT_PARAMETERS: tuple[str, ...] = ("ff", "r2star", "t2star", "field")
"""Parameter codes accepted in the values table."""

FF_UNITS = ("percent", "fraction")
FIELD_UNITS = ("Hz", "ppm")
T2STAR_UNITS = ("ms",)
R2STAR_UNITS = ("1/s",)


def t2star_ms_to_r2star(t2star_ms: np.ndarray | float) -> np.ndarray | float:
    """R2* in 1/s from T2* in ms: R2* = 1000 / T2* (definition of the rate)."""
    return 1000.0 / np.asarray(t2star_ms, dtype=float)


def r2star_to_t2star_ms(r2star: np.ndarray | float) -> np.ndarray | float:
    """T2* in ms from R2* in 1/s: T2* = 1000 / R2*."""
    return 1000.0 / np.asarray(r2star, dtype=float)


def fraction_to_percent(ff: np.ndarray | float) -> np.ndarray | float:
    """Fat fraction from a 0-1 fraction to percent."""
    return np.asarray(ff, dtype=float) * 100.0


def ppm_to_hz(ppm: np.ndarray | float, field_strength_t: np.ndarray | float) -> np.ndarray:
    """Off-resonance in Hz from ppm at field strength B0 (tesla): ppm * 1e-6 * gamma_bar * B0."""
    return (
        np.asarray(ppm, dtype=float)
        * 1e-6
        * PROTON_GAMMA_BAR_MHZ_PER_T
        * 1e6
        * np.asarray(field_strength_t, dtype=float)
    )
