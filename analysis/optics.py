"""Closed-form modulation transfer functions of an imaging chain: optics, blur, pixel.

Frequencies are spatial frequencies in the image plane. The pixel-based terms take cycles per
pixel; the diffraction term takes cycles per millimetre (it depends on wavelength and f-number,
not on the pixel), and `SystemMtf` converts with the pixel pitch.

* Diffraction-limited incoherent imaging through a circular aperture (Goodman, *Introduction to
  Fourier Optics*, 3rd ed., section 6.3.2)::

      MTF(nu) = (2/pi) (acos(nu) - nu sqrt(1 - nu^2)),   nu = f lambda N  (0 <= nu <= 1)

  zero beyond the cut-off ``1 / (lambda N)``. Over a band it is averaged over wavelength with flat
  spectral weight (Gauss-Legendre nodes): a simple, stated choice of the simulated camera.
* A Gaussian blur spot of standard deviation ``s`` pixels (aberrations, defocus, jitter) has
  ``MTF(f) = exp(-2 pi^2 s^2 f^2)`` (Fourier transform of a Gaussian; Boreman, *Modulation
  Transfer Function in Optical and Electro-Optical Systems*, SPIE 2001, ch. 1).
* A square pixel of full fill factor has ``|sinc(f)|`` along a pixel axis (``2/pi`` at Nyquist,
  Boreman ch. 2); along a direction at angle ``theta`` to the pixel axes its 2-D transfer function
  reads ``sinc(f cos theta) sinc(f sin theta)`` (the square's 2-D Fourier transform).

The system MTF is their product (cascade of linear shift-invariant stages).

>>> round(float(pixel_aperture_mtf(0.5)), 4)
0.6366
>>> round(float(diffraction_mtf_mono(0.5 / (10e-3 * 2.0), 10.0, 2.0)), 4)
0.391
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

# Gaussian approximation of the diffraction spot of a circular aperture: sigma = 0.21 lambda / NA
# = 0.42 lambda N for NA = 1 / (2N) (Zhang, Zerubia & Olivo-Marin, Appl. Opt. 46(10):1819, 2007,
# paraxial Airy fit).
AIRY_GAUSS_SIGMA_PER_LAMBDA_N = 0.42


def diffraction_mtf_mono(f_cyc_per_mm: float | np.ndarray, wavelength_um: float,
                         f_number: float) -> np.ndarray:
    """Incoherent diffraction MTF of a circular aperture at one wavelength (Goodman 6.3.2)."""
    if not (wavelength_um > 0 and f_number > 0):
        raise ValueError("wavelength and f-number must be > 0")
    nu = np.abs(np.asarray(f_cyc_per_mm, dtype=float)) * wavelength_um * 1e-3 * f_number
    nu_c = np.clip(nu, 0.0, 1.0)
    val = (2.0 / math.pi) * (np.arccos(nu_c) - nu_c * np.sqrt(1.0 - nu_c * nu_c))
    return np.where(nu < 1.0, val, 0.0)


def band_nodes(band_um: tuple[float, float], n: int = 16) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre wavelengths (um) and weights (summing to 1) over a band: flat weighting."""
    lo, hi = float(band_um[0]), float(band_um[1])
    if not 0 < lo < hi < math.inf:
        raise ValueError(f"band {band_um} um: need 0 < lo < hi, finite")
    x, w = np.polynomial.legendre.leggauss(n)
    return 0.5 * (hi - lo) * x + 0.5 * (hi + lo), w / w.sum()


def diffraction_mtf(f_cyc_per_mm: float | np.ndarray, band_um: tuple[float, float],
                    f_number: float, nodes: int = 16) -> np.ndarray:
    """Band-averaged (flat spectral weight) diffraction MTF of a circular aperture."""
    lam, w = band_nodes(band_um, nodes)
    f = np.asarray(f_cyc_per_mm, dtype=float)
    return sum(wi * diffraction_mtf_mono(f, li, f_number) for li, wi in zip(lam, w))


def gaussian_mtf(f_cyc_per_px: float | np.ndarray, sigma_px: float) -> np.ndarray:
    """MTF of a Gaussian spot of `sigma_px`: exp(-2 pi^2 s^2 f^2)."""
    f = np.asarray(f_cyc_per_px, dtype=float)
    return np.exp(-2.0 * math.pi ** 2 * sigma_px ** 2 * f * f)


def pixel_aperture_mtf(f_cyc_per_px: float | np.ndarray, angle_deg: float = 0.0,
                       fill: float = 1.0) -> np.ndarray:
    """Transfer function of a square pixel aperture of side `fill` pitches, along a direction
    `angle_deg` from the pixel's x axis: sinc(fill f cos) sinc(fill f sin) (np.sinc is
    sin(pi x)/(pi x)). May be negative beyond the first zero (a phase reversal)."""
    f = np.asarray(f_cyc_per_px, dtype=float)
    a = math.radians(angle_deg)
    return np.sinc(fill * f * math.cos(a)) * np.sinc(fill * f * math.sin(a))


def airy_gaussian_sigma_um(band_um: tuple[float, float], f_number: float) -> float:
    """Gaussian-equivalent sigma of the diffraction spot over a band: 0.42 N sqrt(<lambda^2>)."""
    lam, w = band_nodes(band_um)
    return AIRY_GAUSS_SIGMA_PER_LAMBDA_N * f_number * math.sqrt(float(np.sum(w * lam * lam)))


@dataclass(frozen=True)
class SystemMtf:
    """Diffraction (circular aperture, band-averaged) x Gaussian blur x square pixel aperture.

    Call it with cycles per pixel (and the direction of the frequency in the image, degrees from
    the x axis) to get the system's MTF; every term is a closed form, so it is the truth against
    which a measured MTF is judged.

    >>> m = SystemMtf(f_number=1.0, band_um=(8.0, 12.0), pixel_pitch_um=17.0, blur_sigma_px=0.0)
    >>> round(float(m(0.0)), 6)
    1.0
    """

    f_number: float
    band_um: tuple[float, float]
    pixel_pitch_um: float
    blur_sigma_px: float
    pixel_fill: float = 1.0

    def optics(self, f_cyc_per_px: float | np.ndarray) -> np.ndarray:
        """Optics only (diffraction x Gaussian blur): isotropic."""
        f = np.abs(np.asarray(f_cyc_per_px, dtype=float))
        f_mm = f / (self.pixel_pitch_um * 1e-3)
        return diffraction_mtf(f_mm, self.band_um, self.f_number) * gaussian_mtf(
            f, self.blur_sigma_px)

    def __call__(self, f_cyc_per_px: float | np.ndarray, angle_deg: float = 0.0) -> np.ndarray:
        return self.optics(f_cyc_per_px) * pixel_aperture_mtf(f_cyc_per_px, angle_deg,
                                                              self.pixel_fill)

    @property
    def cutoff_cyc_per_px(self) -> float:
        """Above this frequency the optics pass nothing (diffraction cut-off at the shortest
        wavelength of the band)."""
        return self.pixel_pitch_um / (self.band_um[0] * self.f_number)
