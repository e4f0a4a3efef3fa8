"""Reference checks of Planck radiometry (analysis/radiometry.py)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants as sc
from scipy.integrate import quad

from analysis.radiometry import (
    band_radiance,
    band_radiance_derivative,
    celsius_to_kelvin,
    spectral_radiance,
    stefan_boltzmann_radiance,
)


def _quad_band(t: float, lo: float, hi: float) -> float:
    """Independent check: adaptive quadrature of Planck's law written out here (scipy.constants)."""
    def planck(lam_um: float) -> float:
        lam = lam_um * 1e-6
        return 2 * sc.h * sc.c ** 2 / lam ** 5 / math.expm1(sc.h * sc.c / (lam * sc.k * t)) * 1e-6
    val, _ = quad(planck, lo, hi, epsabs=0, epsrel=1e-12, limit=200)
    return val


def test_full_band_is_stefan_boltzmann() -> None:
    # sigma T^4 / pi from scipy.constants (CODATA) = 146.200 W m^-2 sr^-1 at 300 K.
    expected = sc.Stefan_Boltzmann * 300.0 ** 4 / math.pi
    assert band_radiance(300.0, (0.0, math.inf)) == pytest.approx(expected, rel=1e-10)
    assert expected == pytest.approx(146.200, abs=5e-4)
    assert stefan_boltzmann_radiance(300.0) == pytest.approx(expected, rel=1e-15)
    # d/dT of sigma T^4/pi = 4 sigma T^3 / pi (closed form).
    assert band_radiance_derivative(300.0, (0.0, math.inf)) == pytest.approx(
        4 * sc.Stefan_Boltzmann * 300.0 ** 3 / math.pi, rel=1e-10)


@pytest.mark.parametrize("band, radiance, slope", [
    # Band-integral values at 300 K (Widger & Woodall 1976 method; CHECKS.md, 3-5 significant
    # figures) and an independent quadrature below.
    ((8.0, 14.0), 54.934, 0.8378),
    ((8.0, 12.0), 38.500, 0.6297),
    ((3.0, 5.0), 1.8660, 0.06770),
])
def test_in_band_radiance_at_300K(band: tuple[float, float], radiance: float, slope: float) -> None:
    value = band_radiance(300.0, band)
    assert value == pytest.approx(radiance, abs=6e-4 * max(1.0, radiance / 10))
    assert value == pytest.approx(_quad_band(300.0, *band), rel=1e-10)
    assert band_radiance_derivative(300.0, band) == pytest.approx(slope, rel=2e-4)


def test_derivative_matches_finite_difference_of_quadrature() -> None:
    # Central difference of the independent quadrature, step 0.01 K (error O(h^2) ~ 1e-9 rel).
    for t in (250.0, 300.0, 350.0):
        fd = (_quad_band(t + 0.01, 8, 12) - _quad_band(t - 0.01, 8, 12)) / 0.02
        assert band_radiance_derivative(t, (8.0, 12.0)) == pytest.approx(fd, rel=1e-7)


def test_spectral_radiance_at_10um() -> None:
    # 9.924 W m^-2 sr^-1 um^-1 at 10 um, 300 K (CHECKS.md, from Planck's law with CODATA).
    assert float(spectral_radiance(10.0, 300.0)) == pytest.approx(9.924, abs=5e-4)


def test_vectorised_over_temperature_and_celsius() -> None:
    t = np.array([280.0, 300.0, 320.0])
    vec = band_radiance(t, (8.0, 12.0))
    assert vec.shape == (3,)
    np.testing.assert_allclose(vec, [band_radiance(float(x), (8.0, 12.0)) for x in t], rtol=1e-14)
    assert celsius_to_kelvin(26.85) == pytest.approx(300.0, abs=1e-12)  # 0 C = 273.15 K (SI)
    with pytest.raises(ValueError, match="band"):
        band_radiance(300.0, (12.0, 8.0))
