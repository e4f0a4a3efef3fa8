"""Blackbody radiometry: Planck spectral radiance, in-band radiance and its temperature slope.

Units: temperatures in kelvin, wavelengths in micrometres, radiance in W m^-2 sr^-1, spectral
radiance in W m^-2 sr^-1 um^-1. Constants are CODATA values from scipy.constants.

In-band radiance uses the band-integral series of Widger & Woodall (Bull. Amer. Meteor. Soc.
57(10):1217, 1976): with ``x = c2 / (lambda T)``,
``int_x^inf t^3 / (e^t - 1) dt = sum_n e^(-n x) (x^3/n + 3x^2/n^2 + 6x/n^3 + 6/n^4)``,
which is exact to the truncation of the series (no quadrature error), handles open bands
(``hi = inf`` for the full spectrum) and costs a few dozen exponentials: cheap enough to call for
every rendered frame. Pure functions, no caches.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import constants as sc

H = sc.h
C = sc.c
K_B = sc.k
C2_UM_K = H * C / K_B * 1e6  # second radiation constant, um K
_PI4_15 = math.pi ** 4 / 15.0
_SMALL_X = 0.05


def spectral_radiance(wavelength_um: float | np.ndarray, temperature_k: float | np.ndarray
                      ) -> np.ndarray:
    """Planck's law, W m^-2 sr^-1 um^-1 (broadcasts over wavelength and temperature).

    >>> round(float(spectral_radiance(10.0, 300.0)), 3)   # near the 300 K peak (Wien: 9.66 um)
    9.924
    """
    lam = np.asarray(wavelength_um, dtype=float) * 1e-6
    t = np.asarray(temperature_k, dtype=float)
    x = H * C / (lam * K_B * t)
    return 2.0 * H * C ** 2 / lam ** 5 / np.expm1(x) * 1e-6


def _tail_integral(x: np.ndarray) -> np.ndarray:
    """``int_x^inf t^3 / (e^t - 1) dt`` for x >= 0 (Widger & Woodall series; small-x expansion)."""
    x = np.asarray(x, dtype=float)
    out = np.empty_like(x)
    small = x < _SMALL_X
    xs = x[small]
    # int_0^x t^3/(e^t-1) dt = x^3/3 - x^4/8 + x^5/60 - x^7/5040 + ... (Bernoulli expansion)
    out[small] = _PI4_15 - (xs ** 3 / 3 - xs ** 4 / 8 + xs ** 5 / 60 - xs ** 7 / 5040)
    xl = x[~small]
    if xl.size:
        n_max = int(math.ceil(2.0 + 36.0 / float(xl.min())))  # e^(-n x) < 1e-15 beyond
        acc = np.zeros_like(xl)
        x2, x3 = xl * xl, xl * xl * xl
        for n in range(1, n_max + 1):
            acc += np.exp(-n * xl) * (x3 / n + 3 * x2 / n ** 2 + 6 * xl / n ** 3 + 6 / n ** 4)
        out[~small] = acc
    return out


def _band_x(temperature_k: np.ndarray, band_um: tuple[float, float]) -> tuple[np.ndarray,
                                                                                np.ndarray]:
    lo, hi = float(band_um[0]), float(band_um[1])
    if not (0.0 <= lo < hi):
        raise ValueError(f"band {band_um} um: need 0 <= lo < hi (use hi = inf for an open band)")
    t = np.asarray(temperature_k, dtype=float)
    if np.any(t <= 0):
        raise ValueError(f"temperature must be > 0 K, got {temperature_k}")
    x_lo_lambda = np.full_like(t, np.inf) if lo == 0.0 else C2_UM_K / (lo * t)
    x_hi_lambda = np.zeros_like(t) if math.isinf(hi) else C2_UM_K / (hi * t)
    return x_lo_lambda, x_hi_lambda


def _prefactor(t: np.ndarray) -> np.ndarray:
    return 2.0 * K_B ** 4 * t ** 4 / (H ** 3 * C ** 2)


def band_radiance(temperature_k: float | np.ndarray, band_um: tuple[float, float]
                  ) -> float | np.ndarray:
    """Radiance of a blackbody between ``band_um = (lo, hi)`` micrometres, W m^-2 sr^-1.

    ``(0, inf)`` gives ``sigma T^4 / pi`` (Stefan-Boltzmann).

    >>> round(band_radiance(300.0, (0, math.inf)), 3), round(stefan_boltzmann_radiance(300.0), 3)
    (146.2, 146.2)
    """
    t = np.asarray(temperature_k, dtype=float)
    x1, x2 = _band_x(np.atleast_1d(t), band_um)
    g1 = np.where(np.isinf(x1), 0.0, _tail_integral(np.where(np.isinf(x1), 1.0, x1)))
    val = _prefactor(np.atleast_1d(t)) * (_tail_integral(x2) - g1)
    return float(val[0]) if t.ndim == 0 else val.reshape(t.shape)


def band_radiance_derivative(temperature_k: float | np.ndarray, band_um: tuple[float, float]
                             ) -> float | np.ndarray:
    """dL/dT of the in-band radiance, W m^-2 sr^-1 K^-1 (Leibniz rule on the band integral).

    With ``L = A T^4 I(x1, x2)`` and ``dx/dT = -x/T``:
    ``dL/dT = A T^3 (4 I - x1 f(x1) + x2 f(x2))``, ``f(x) = x^3 / (e^x - 1)``.
    """
    t = np.atleast_1d(np.asarray(temperature_k, dtype=float))
    x1, x2 = _band_x(t, band_um)
    finite1 = np.isfinite(x1)
    x1f = np.where(finite1, x1, 1.0)
    g1 = np.where(finite1, _tail_integral(x1f), 0.0)
    integral = _tail_integral(x2) - g1

    def xf(x: np.ndarray) -> np.ndarray:
        with np.errstate(divide="ignore", invalid="ignore"):
            v = x ** 4 / np.expm1(x)
        return np.where(x > 0, v, 0.0)

    term1 = np.where(finite1, xf(x1f), 0.0)
    val = _prefactor(t) / t * (4.0 * integral - term1 + xf(x2))
    return float(val[0]) if np.ndim(temperature_k) == 0 else val.reshape(np.shape(temperature_k))


def stefan_boltzmann_radiance(temperature_k: float) -> float:
    """Total radiance sigma T^4 / pi of a Lambertian blackbody, W m^-2 sr^-1."""
    return sc.Stefan_Boltzmann * float(temperature_k) ** 4 / math.pi


def celsius_to_kelvin(celsius: float) -> float:
    """Degrees Celsius (the bench's unit) to kelvin (Planck's).

    >>> celsius_to_kelvin(20.0)
    293.15
    """
    return float(celsius) + sc.zero_Celsius
