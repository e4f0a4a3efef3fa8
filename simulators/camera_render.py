"""Render what the simulated UUT sees: target through the collimator, optics, radiometry, noise.

Image formation (all in counts, arrays indexed ``[row, col]``, positions in ``(x, y)``):

* Background: the target plate at `plate_c` (emissivity 1) fills the field; an open aperture
  shows the source at `source_c` everywhere. Radiance is Planck's law over the UUT band.
* Pinholes: each is a disc of angular diameter ``d / F`` at the source radiance. The disc
  convolved with the Gaussian blur spot is approximated by one Gaussian of variance
  ``blur_sigma^2 + (r_disc / 2)^2`` per axis (the disc's own second moment, r^2/4), centred on
  the exact truth position from `analysis.geometry.project` (so the approximation changes the
  spot's shape, never its centroid). The disc radius in pixels uses the on-axis scale ``fx``.
  The Gaussian is integrated over each pixel's area exactly with error functions (separable),
  in a small window around each spot: noise-free centroids are unbiased to the aliasing level of
  the pixel-sampled Gaussian (far below 0.02 px for sigma >= 0.5 px).
* Total signal of a pinhole: ``R * dL * Omega_pinhole / Omega_pixel`` with
  ``Omega_pinhole = pi (d/2)^2 / F^2`` and ``Omega_pixel = 1 / (fx fy)``: an extended source
  filling a pixel gives ``R * dL`` in that pixel.
* Slanted edge: a straight edge through the image of the plate centre (the local image of the
  plate's edge; distortion curvature over the edge is neglected), imaged through the camera's
  exact transfer function (`CameraTruth.system_mtf`: diffraction x Gaussian aberration blur) and
  integrated over each pixel square: the edge-spread function along the normal is
  ``1/2 + (1/pi) int_0^fc T(f) sin(2 pi f d) / f df`` with ``T`` the optics' MTF times the pixel
  square's transfer function along the normal, ``sinc(f cos t) sinc(f sin t)`` (the square's
  width distribution along the normal is a trapezoid). An edge measured on these frames must give
  back `system_mtf` along its normal.
* Mounting error (`CameraTruth.mounting`): the UUT's axes are turned from the mount's by
  ``R_y(az) R_x(el) R_z(roll)`` after the gimbal; zero leaves the old model untouched.
* Fixed pattern (gain, offset) and bad pixels from `CameraTruth`, drawn once from the truth's own
  seed, so a truth file always has the same bad pixels whatever the run's seed. Temporal noise is
  drawn per frame from a generator seeded by ``(run seed, frame index)``, or by ``(run seed,
  capture key, frame index in the capture)`` when the grabber names the capture, so a capture
  gives the same frames however the run got there (a resume included).
* Speed: maps that depend on geometry only (source fraction, gain x fraction) are cached per
  target and pose; a temperature enters as two scalar radiance factors; noise comes from raw
  generator output (PCG64 `random_raw`, 16 bits per pixel) through a 65,536-entry inverse normal CDF table (inversion method:
  Devroye, *Non-Uniform Random Variate Generation*, 1986, ch. 2), scaled to unit variance (tails
  end at +/-4.3 sigma). ADC: round, clip to ``[0, 2^bits - 1]``. Dead pixels read 0 counts, hot
  pixels full scale.
"""

from __future__ import annotations

import hashlib
import math
from collections import OrderedDict
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy.special import erf, ndtr, ndtri

from analysis.geometry import collimator_directions, gimbal_rotation, project, to_camera_frame
from analysis.radiometry import band_radiance, band_radiance_derivative, celsius_to_kelvin
from analysis.targets import OpenAperture, PinholeGrid, SinglePinhole, SlantedEdge, Target
from simulators.camera_truth import CameraTruth, MountingError

_SQRT2 = math.sqrt(2.0)
_INV_SQRT_2PI = 1.0 / math.sqrt(2.0 * math.pi)


@dataclass(frozen=True)
class SceneState:
    """What is in front of the UUT. Frozen and hashable: renderers cache per scene.

    `target` None means a blank plate (the wheel between slots).
    """

    source_c: float
    plate_c: float
    target: Target | None
    az_deg: float = 0.0
    el_deg: float = 0.0
    collimator_focal_mm: float = 1000.0


@dataclass(frozen=True)
class BadPixels:
    """Flat indices (row-major) of the bad pixels drawn for one renderer."""

    dead: np.ndarray
    hot: np.ndarray
    noisy: np.ndarray
    unresponsive: np.ndarray

    def as_dict(self) -> dict[str, np.ndarray]:
        return {"dead": self.dead, "hot": self.hot, "noisy": self.noisy,
                "unresponsive": self.unresponsive}


def _pixel_integrated_gaussian(centres: np.ndarray, sigma: np.ndarray, start: np.ndarray,
                               size: int) -> np.ndarray:
    """Fraction of a unit 1-D Gaussian falling in each of `size` pixels from `start` (N, size).

    Pixel i covers [i - 0.5, i + 0.5] (pixel centres at integers).
    """
    edges = start[:, None] + np.arange(size + 1)[None, :] - 0.5
    cdf = 0.5 * (1.0 + erf((edges - centres[:, None]) / (_SQRT2 * sigma[:, None])))
    return np.diff(cdf, axis=1)


def _second_antiderivative_ncdf(z: np.ndarray) -> np.ndarray:
    """H(z) with H'' = Phi (normal CDF): ((z^2 + 1) Phi(z) + z phi(z)) / 2."""
    return 0.5 * ((z * z + 1.0) * ndtr(z) + z * np.exp(-0.5 * z * z) * _INV_SQRT_2PI)


def _first_antiderivative_ncdf(z: np.ndarray) -> np.ndarray:
    """G(z) with G' = Phi: z Phi(z) + phi(z)."""
    return z * ndtr(z) + np.exp(-0.5 * z * z) * _INV_SQRT_2PI


def pixel_integrated_edge(width: int, height: int, point: tuple[float, float],
                          normal: tuple[float, float], sigma: float) -> np.ndarray:
    """Fraction of each pixel on the positive side of a Gaussian-blurred straight edge.

    The edge passes through `point` (x, y) with unit `normal` (pointing to the bright side).
    Exact: the double integral of ``Phi((n . p - c) / sigma)`` over the pixel square.
    """
    a, b = float(normal[0]), float(normal[1])
    c = a * point[0] + b * point[1]
    xs = np.arange(width, dtype=float)
    ys = np.arange(height, dtype=float)[:, None]
    dist = a * xs[None, :] + b * ys - c
    out = np.where(dist > 0, 1.0, 0.0)
    near = np.abs(dist) < 8.0 * sigma + 1.5
    dn = dist[near]
    if min(abs(a), abs(b)) > 1e-3:
        h = _second_antiderivative_ncdf

        def z(dx: float, dy: float) -> np.ndarray:
            return (dn + a * dx + b * dy) / sigma

        val = sigma * sigma / (a * b) * (h(z(0.5, 0.5)) - h(z(-0.5, 0.5))
                                         - h(z(0.5, -0.5)) + h(z(-0.5, -0.5)))
    else:  # edge along a pixel axis: the integral across the pixel along the normal suffices
        s = a if abs(a) >= abs(b) else b
        g = _first_antiderivative_ncdf
        val = sigma / s * (g((dn + 0.5 * s) / sigma) - g((dn - 0.5 * s) / sigma))
    out[near] = np.clip(val, 0.0, 1.0)
    return out


def edge_spread_table(optics_mtf: Callable[[np.ndarray], np.ndarray], normal: tuple[float, float],
                      cutoff_cyc_per_px: float, reach_px: float = 40.0,
                      step_px: float = 0.02) -> tuple[np.ndarray, np.ndarray]:
    """Pixel-integrated edge-spread function along the edge normal, tabulated on [0, reach].

    ``E(d) = 1/2 + (1/pi) int_0^fc T(f) sin(2 pi f d) / f df`` (a step's image through an even
    transfer function T with T(0) = 1), ``T = optics_mtf(f) sinc(f |nx|) sinc(f |ny|)``; E(-d) =
    1 - E(d). Trapezoidal rule on f steps of 1/(25 reach): 25 samples per period of the fastest
    oscillation. Returns (d, E(d)) for d >= 0.
    """
    a, b = abs(float(normal[0])), abs(float(normal[1]))
    n_f = int(math.ceil(cutoff_cyc_per_px * reach_px * 25.0)) + 1
    f = np.linspace(0.0, cutoff_cyc_per_px, n_f)
    t = optics_mtf(f) * np.sinc(f * a) * np.sinc(f * b)
    w = np.full(n_f, f[1] - f[0])
    w[0] = w[-1] = 0.5 * (f[1] - f[0])
    d = np.arange(0.0, reach_px + step_px, step_px)
    # sin(2 pi f d) / f -> 2 pi d at f = 0
    kernel = np.empty((len(d), n_f))
    kernel[:, 1:] = np.sin(2.0 * math.pi * d[:, None] * f[None, 1:]) / f[None, 1:]
    kernel[:, 0] = 2.0 * math.pi * d
    e = 0.5 + (kernel @ (t * w)) / math.pi
    return d, e


def psf_edge(width: int, height: int, point: tuple[float, float], normal: tuple[float, float],
             table: tuple[np.ndarray, np.ndarray]) -> np.ndarray:
    """Fraction of each pixel on the bright side of an edge imaged through a tabulated ESF."""
    a, b = float(normal[0]), float(normal[1])
    c = a * point[0] + b * point[1]
    dist = (a * np.arange(width, dtype=float)[None, :]
            + b * np.arange(height, dtype=float)[:, None] - c)
    d_tab, e_tab = table
    ad = np.abs(dist)
    val = np.interp(ad, d_tab, e_tab)
    # beyond the table the diffraction tail falls as 1/d (the MTF's linear cusp at f = 0)
    far = ad > d_tab[-1]
    val[far] = 1.0 - (1.0 - e_tab[-1]) * d_tab[-1] / ad[far]
    return np.where(dist >= 0, val, 1.0 - val)


def mount_rotation(mounting: MountingError) -> np.ndarray:
    """UUT axes in the mount's frame: ``R_y(az) R_x(el) R_z(roll)`` (gimbal conventions)."""
    r = mounting.roll_mrad * 1e-3
    c, s = math.cos(r), math.sin(r)
    rz = np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])
    return gimbal_rotation(math.degrees(mounting.az_mrad * 1e-3),
                           math.degrees(mounting.el_mrad * 1e-3)) @ rz


def plate_to_pixels(truth: CameraTruth, points_mm: np.ndarray, collimator_focal_mm: float,
                    az_deg: float = 0.0, el_deg: float = 0.0) -> np.ndarray:
    """Target plate points (N, 2) mm -> true pixel positions (x, y): collimator, gimbal, the
    UUT's mounting error, then the UUT's own geometry."""
    d = to_camera_frame(collimator_directions(points_mm, collimator_focal_mm), az_deg, el_deg)
    if not truth.mounting.is_zero:
        d = d @ mount_rotation(truth.mounting)  # row-wise R^T d
    return project(truth.geometry, d)


class RadianceTable:
    """In-band radiance as a function of temperature (C), fast for one scalar at a time.

    Cubic Hermite interpolation on a 0.25 K grid of exact values and slopes (Widger & Woodall
    band integral and its derivative): interpolation error ``h^4 max|d4L/dT4| / 384``, below
    1e-9 relative here; outside the grid the exact series is used.
    """

    def __init__(self, band_um: tuple[float, float], lo_c: float = -80.0, hi_c: float = 600.0,
                 step_k: float = 0.25) -> None:
        self.band = band_um
        self.lo, self.step = lo_c, step_k
        t = np.arange(lo_c, hi_c + step_k / 2, step_k)
        self.hi = float(t[-1])
        tk = t + 273.15
        self._l = np.asarray(band_radiance(tk, band_um), dtype=float).tolist()
        self._d = (np.asarray(band_radiance_derivative(tk, band_um), dtype=float)
                   * step_k).tolist()

    def __call__(self, t_c: float) -> float:
        if not self.lo <= t_c < self.hi:
            return float(band_radiance(celsius_to_kelvin(t_c), self.band))
        u = (t_c - self.lo) / self.step
        i = int(u)
        s = u - i
        s2, s3 = s * s, s * s * s
        return ((2 * s3 - 3 * s2 + 1) * self._l[i] + (s3 - 2 * s2 + s) * self._d[i]
                + (-2 * s3 + 3 * s2) * self._l[i + 1] + (s3 - s2) * self._d[i + 1])


def _normal_table() -> np.ndarray:
    """Inverse normal CDF at the 65,536 mid-quantiles, scaled to exactly unit variance."""
    lut = ndtri((np.arange(65536) + 0.5) / 65536.0)
    return lut / lut.std()


def _key_words(key: str) -> list[int]:
    """A capture key as four 32-bit words (BLAKE2b): stable across processes and Python runs."""
    digest = hashlib.blake2b(key.encode("utf-8"), digest_size=16).digest()
    return [int.from_bytes(digest[i:i + 4], "little") for i in range(0, 16, 4)]



@dataclass(frozen=True)
class _Patch:
    """A float32 map that is zero outside rows x cols (the box around its non-zero pixels)."""

    rows: slice
    cols: slice
    values: np.ndarray

    @classmethod
    def of(cls, full: np.ndarray) -> "_Patch":
        nz_rows = np.flatnonzero(full.any(axis=1))
        nz_cols = np.flatnonzero(full.any(axis=0))
        if not len(nz_rows):
            return cls(slice(0, 0), slice(0, 0), np.zeros((0, 0), dtype=np.float32))
        rows = slice(int(nz_rows[0]), int(nz_rows[-1]) + 1)
        cols = slice(int(nz_cols[0]), int(nz_cols[-1]) + 1)
        values = np.ascontiguousarray(full[rows, cols], dtype=np.float32)
        values.setflags(write=False)
        return cls(rows, cols, values)

class CameraRenderer:
    """Frames of one simulated camera.

    Fixed pattern and bad pixels come from the truth's seed; `seed` (the run's) only seeds the
    temporal noise. Geometry-only maps are cached per target and pose, so temperatures may change
    every frame at full speed.
    """

    def __init__(self, truth: CameraTruth, seed: int | None = None, cache_size: int = 8) -> None:
        self.truth = truth
        self.seed = truth.seed if seed is None else int(seed)
        g = truth.geometry
        self.shape = (g.height, g.width)
        npix = g.height * g.width
        rng = np.random.default_rng(np.random.SeedSequence([int(truth.seed), 0]))
        self.gain_map = (1.0 + truth.gain_fpn_rel * rng.standard_normal(self.shape))
        self.offset_map = truth.offset_fpn_counts * rng.standard_normal(self.shape)
        order = rng.permutation(npix)
        counts = [int(round(f * npix)) for f in (truth.dead_fraction, truth.hot_fraction,
                                                  truth.noisy_fraction,
                                                  truth.unresponsive_fraction)]
        edges = np.cumsum([0] + counts)
        dead, hot, noisy, unresp = (np.sort(order[edges[i]:edges[i + 1]]) for i in range(4))
        self.bad_pixels = BadPixels(dead=dead, hot=hot, noisy=noisy, unresponsive=unresp)
        self.gain_map.reshape(-1)[unresp] *= truth.unresponsive_gain
        sigma = np.full(npix, truth.temporal_noise_counts, dtype=np.float32)
        sigma[noisy] *= truth.noisy_factor
        self.sigma_map = sigma.reshape(self.shape)
        self._gain32 = self.gain_map.astype(np.float32)
        # + 0.5: the ADC's rounding folded in (truncation of x + 0.5 after clipping at 0)
        self._base32 = (truth.offset_counts + self.offset_map + 0.5).astype(np.float32)
        self._scratch = np.empty(self.shape, dtype=np.float32)
        self._radiance = RadianceTable(truth.band_um)
        self._noise_table = (_normal_table() * truth.temporal_noise_counts).astype(np.float32)
        self._patterns: OrderedDict[tuple, tuple[np.ndarray, np.ndarray | None]] = OrderedDict()
        self._cache_size = max(1, cache_size)
        self._edge_tables: dict[tuple[float, float], tuple[np.ndarray, np.ndarray]] = {}

    # --- truth -------------------------------------------------------------------------------
    def expected_spots(self, scene: SceneState) -> tuple[np.ndarray, list[tuple[int, int]]]:
        """Exact truth positions (N, 2) as (x, y) px of the pinholes, and their (row, col) labels.

        Empty for targets without pinholes.
        """
        t = scene.target
        if not isinstance(t, (PinholeGrid, SinglePinhole)):
            return np.zeros((0, 2)), []
        px = plate_to_pixels(self.truth, t.points_mm(), scene.collimator_focal_mm,
                             scene.az_deg, scene.el_deg)
        return px, t.labels()

    def radiances(self, scene: SceneState) -> tuple[float, float]:
        """(source, plate) in-band radiance, W m^-2 sr^-1."""
        band = self.truth.band_um
        return (float(band_radiance(celsius_to_kelvin(scene.source_c), band)),
                float(band_radiance(celsius_to_kelvin(scene.plate_c), band)))

    # --- images ------------------------------------------------------------------------------
    def render_clean(self, scene: SceneState) -> np.ndarray:
        """Noise-free mean signal (counts, float64) of an ideal camera: no FPN, no bad pixels.

        The signal is linear in radiance: plate radiance everywhere plus the source-minus-plate
        contrast times the fraction of each pixel that sees the source (the pattern). The pattern
        depends on geometry only, so it is cached and temperatures may change every frame.
        """
        tr = self.truth
        l_src, l_plate = self.radiances(scene)
        r = tr.responsivity_counts_per_radiance
        return tr.offset_counts + r * (l_plate + (l_src - l_plate) * self.source_fraction(scene))

    def source_fraction(self, scene: SceneState) -> np.ndarray:
        """Fraction of each pixel's signal that comes from the source (0 plate .. 1 source)."""
        return self._maps(scene)[0]

    def _maps(self, scene: SceneState) -> tuple[np.ndarray, _Patch | None]:
        """(source fraction, gain x fraction as a float32 patch, or None for a uniform fraction
        of 1), cached per target and pose. The patch covers only where the fraction is not zero:
        a single pinhole's spot is a few hundred pixels of a frame, and a scan renders thousands
        of frames of it."""
        target = scene.target
        key = (target, scene.az_deg, scene.el_deg, scene.collimator_focal_mm)
        cached = self._patterns.get(key)
        if cached is not None:
            self._patterns.move_to_end(key)
            return cached
        if isinstance(target, OpenAperture):
            pattern = np.ones(self.shape)
        elif isinstance(target, SlantedEdge):
            pattern = self._edge_fraction(scene, target)
        else:
            pattern = np.zeros(self.shape)
            if isinstance(target, (PinholeGrid, SinglePinhole)):
                self._add_pinholes(pattern, scene, target, 1.0)
        pattern.setflags(write=False)
        patch = None
        if not isinstance(target, OpenAperture):
            patch = _Patch.of(self.gain_map * pattern)
        entry = (pattern, patch)
        self._patterns[key] = entry
        if len(self._patterns) > self._cache_size:
            self._patterns.popitem(last=False)
        return entry

    def _add_pinholes(self, img: np.ndarray, scene: SceneState,
                      target: PinholeGrid | SinglePinhole, delta_counts: float) -> None:
        g = self.truth.geometry
        pos, _ = self.expected_spots(scene)
        ok = np.all(np.isfinite(pos), axis=1)
        pos = pos[ok]
        if not len(pos):
            return
        big_f = scene.collimator_focal_mm
        d = target.diameter_mm
        total = delta_counts * math.pi * (d / 2.0) ** 2 * g.fx * g.fy / big_f ** 2
        r_disc = d / (2.0 * big_f) * g.fx
        sigma = math.sqrt(self.truth.blur_sigma_px ** 2 + r_disc ** 2 / 4.0)
        half = int(math.ceil(6.0 * sigma)) + 1
        size = 2 * half + 1
        h, w = self.shape
        keep = ((pos[:, 0] > -half) & (pos[:, 0] < w - 1 + half)
                & (pos[:, 1] > -half) & (pos[:, 1] < h - 1 + half))
        pos = pos[keep]
        if not len(pos):
            return
        n = len(pos)
        sig = np.full(n, sigma)
        x0 = np.rint(pos[:, 0]).astype(int) - half
        y0 = np.rint(pos[:, 1]).astype(int) - half
        gx = _pixel_integrated_gaussian(pos[:, 0], sig, x0.astype(float), size)
        gy = _pixel_integrated_gaussian(pos[:, 1], sig, y0.astype(float), size)
        weights = total * gy[:, :, None] * gx[:, None, :]            # (N, rows, cols)
        cols = x0[:, None, None] + np.arange(size)[None, None, :]
        rows = y0[:, None, None] + np.arange(size)[None, :, None]
        cols, rows = np.broadcast_arrays(cols, rows)
        inside = (cols >= 0) & (cols < w) & (rows >= 0) & (rows < h)
        flat = (rows[inside] * w + cols[inside])
        img += np.bincount(flat, weights=weights[inside], minlength=h * w).reshape(h, w)

    def edge_geometry(self, scene: SceneState, target: SlantedEdge
                      ) -> tuple[tuple[float, float], tuple[float, float]]:
        """Image of the edge: a point on it (x, y) px and its unit normal toward the source."""
        a = math.radians(target.angle_deg)
        along = np.array([math.sin(a), math.cos(a)])
        normal = np.array([math.cos(a), -math.sin(a)])
        pts = np.array([[0.0, 0.0], 2.0 * along, -2.0 * along, 2.0 * normal])
        px = plate_to_pixels(self.truth, pts, scene.collimator_focal_mm, scene.az_deg,
                             scene.el_deg)
        direction = px[1] - px[2]
        direction /= np.linalg.norm(direction)
        n_img = np.array([-direction[1], direction[0]])
        if float(n_img @ (px[3] - px[0])) < 0:
            n_img = -n_img
        return (float(px[0, 0]), float(px[0, 1])), (float(n_img[0]), float(n_img[1]))

    def _edge_fraction(self, scene: SceneState, target: SlantedEdge) -> np.ndarray:
        g = self.truth.geometry
        point, normal = self.edge_geometry(scene, target)
        key = (round(abs(normal[0]), 9), round(abs(normal[1]), 9))
        table = self._edge_tables.get(key)
        if table is None:
            mtf = self.truth.system_mtf
            table = self._edge_tables[key] = edge_spread_table(
                mtf.optics, normal, mtf.cutoff_cyc_per_px)
        return psf_edge(g.width, g.height, point, normal, table)

    def _factors(self, scene: SceneState) -> tuple[float, float]:
        """Scalar radiance factors (counts): plate level and source-minus-plate contrast."""
        l_src, l_plate = self._radiance(scene.source_c), self._radiance(scene.plate_c)
        r = self.truth.responsivity_counts_per_radiance
        return r * l_plate, r * (l_src - l_plate)

    def _mean_into(self, scene: SceneState, buf: np.ndarray) -> None:
        """Add the expected signal through FPN (offset + gain x clean) to `buf` (float32)."""
        pattern, patch = self._maps(scene)
        plate, contrast = self._factors(scene)
        tmp = self._scratch
        buf += self._base32
        if patch is None:                             # open aperture: the source everywhere
            buf += np.multiply(self._gain32, np.float32(plate + contrast), out=tmp)
        else:
            buf += np.multiply(self._gain32, np.float32(plate), out=tmp)
            if contrast and patch.values.size:
                part = tmp[:patch.values.shape[0], :patch.values.shape[1]]
                buf[patch.rows, patch.cols] += np.multiply(patch.values, np.float32(contrast),
                                                           out=part)

    def render_mean(self, scene: SceneState) -> np.ndarray:
        """Expected value of each pixel before the ADC: clean signal through FPN (float32)."""
        mean = np.zeros(self.shape, dtype=np.float32)
        self._mean_into(scene, mean)
        return mean - np.float32(0.5)

    def noise_bits(self, frame_index: int, capture_key: str | None = None) -> np.ndarray:
        """One frame's 16-bit uniform draws (one per pixel) from a PCG64 generator seeded by
        (run seed, frame index), or by (run seed, capture key, frame index in the capture)."""
        if capture_key is None:
            entropy = [self.seed, 1, int(frame_index)]
        else:
            entropy = [self.seed, 2, *_key_words(capture_key), int(frame_index)]
        n = self.shape[0] * self.shape[1]
        raw = np.random.PCG64(np.random.SeedSequence(entropy)).random_raw((n + 3) // 4)
        return raw.view(np.uint16)[:n]

    def render(self, scene: SceneState, frame_index: int,
               capture_key: str | None = None) -> np.ndarray:
        """One frame (uint16, [row, col]): mean + temporal noise, ADC rounding and clipping,
        dead and hot pixels. The same (seed, capture key, frame_index, scene) always gives the
        same frame."""
        idx = self.noise_bits(frame_index, capture_key)
        buf = np.take(self._noise_table, idx, mode="clip").reshape(self.shape)  # in range: no checks
        flat = buf.reshape(-1)
        if len(self.bad_pixels.noisy):
            flat[self.bad_pixels.noisy] *= np.float32(self.truth.noisy_factor)
        self._mean_into(scene, buf)                   # includes + 0.5: rounding by truncation
        np.clip(buf, 0.0, float(self.truth.full_scale) + 0.25, out=buf)
        frame = buf.astype(np.uint16)
        out = frame.reshape(-1)
        out[self.bad_pixels.dead] = 0
        out[self.bad_pixels.hot] = self.truth.full_scale
        return frame

    def truth_for_scene(self, scene: SceneState) -> dict[str, object]:
        """Ground truth of a scene, JSON-ready: spot positions, radiances, all model parameters."""
        spots, labels = self.expected_spots(scene)
        l_src, l_plate = self.radiances(scene)
        return {
            "scene": {"source_c": scene.source_c, "plate_c": scene.plate_c,
                      "target": None if scene.target is None else scene.target.kind,
                      "az_deg": scene.az_deg, "el_deg": scene.el_deg,
                      "collimator_focal_mm": scene.collimator_focal_mm},
            "radiance_source": l_src, "radiance_plate": l_plate,
            "spots_xy_px": spots.tolist(), "spot_labels_row_col": [list(x) for x in labels],
            "camera": self.truth.to_json_dict(),
            "bad_pixels_xy": self.bad_pixels_xy(),
        }

    def bad_pixels_xy(self) -> dict[str, list[list[int]]]:
        """Planted bad pixels by kind, as (x, y) = (column, row) lists."""
        return {k: np.column_stack(np.unravel_index(v, self.shape)[::-1]).tolist()
                for k, v in self.bad_pixels.as_dict().items()}


def boresight_pixel(truth: CameraTruth, az_deg: float = 0.0, el_deg: float = 0.0,
                    collimator_focal_mm: float = 1000.0) -> np.ndarray:
    """Where the collimator axis lands (x, y) px: the bench's boresight reference (mounting
    error included)."""
    return plate_to_pixels(truth, np.zeros((1, 2)), collimator_focal_mm, az_deg, el_deg)[0]
