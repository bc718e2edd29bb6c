"""Unit conversions against their definitions."""

import numpy as np

from cohort.domain.units import (
    PROTON_GAMMA_BAR_MHZ_PER_T,
    ppm_to_hz,
    r2star_to_t2star_ms,
    t2star_ms_to_r2star,
)


def test_t2star_r2star_threshold_equivalence():
    # R2* = 1/T2* (definition); T2* 20 ms = R2* 50 1/s, the hemorrhage cut-off at 1.5 T
    # (common practice; O'Regan et al. 2009 (memory), Carberry et al. 2018)
    assert t2star_ms_to_r2star(20.0) == 50.0
    assert r2star_to_t2star_ms(50.0) == 20.0
    x = np.array([5.0, 12.7, 35.0])
    np.testing.assert_allclose(r2star_to_t2star_ms(t2star_ms_to_r2star(x)), x)


def test_ppm_to_hz_uses_the_proton_gyromagnetic_ratio():
    # CODATA 2018: gamma_p / 2 pi = 42.577 478 518 MHz/T; 1 ppm at 1.5 T = 63.866 Hz,
    # 3.5 ppm (fat-water shift, common practice) at 3 T = about 447 Hz
    assert PROTON_GAMMA_BAR_MHZ_PER_T == 42.577478518
    np.testing.assert_allclose(ppm_to_hz(1.0, 1.5), 63.866, atol=1e-3)
    np.testing.assert_allclose(ppm_to_hz(3.5, 3.0), 447.06, atol=0.01)
