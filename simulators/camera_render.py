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
  plate's edge; distortion curvature over the edge is neglected), blurred by the Gaussian and
  integrated exactly over each pixel square (closed-form double integral of the normal CDF).
* Fixed pattern and bad pixels from `CameraTruth`, drawn once per renderer; temporal noise drawn
  per frame from a generator seeded by ``(seed, frame_index)``; ADC: round, clip to
  ``[0, 2^bits - 1]``. Dead pixels read 0 counts, hot pixels full scale.
"""

from __future__ import annotations

import math
from collections import OrderedDict
from dataclasses import dataclass

import numpy as np
from scipy.special import erf, ndtr

from analysis.geometry import collimator_directions, project, project_target, to_camera_frame
from analysis.radiometry import band_radiance, celsius_to_kelvin
from analysis.targets import OpenAperture, PinholeGrid, SinglePinhole, SlantedEdge, Target
from simulators.camera_truth import CameraTruth

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


class CameraRenderer:
    """Frames of one simulated camera. Fixed pattern drawn once from `seed`; clean images cached
    per scene (a few scenes), so streaming only adds noise."""

    def __init__(self, truth: CameraTruth, seed: int | None = None, cache_size: int = 4) -> None:
        self.truth = truth
        self.seed = truth.seed if seed is None else int(seed)
        g = truth.geometry
        self.shape = (g.height, g.width)
        npix = g.height * g.width
        rng = np.random.default_rng(np.random.SeedSequence([self.seed, 0]))
        self.gain_map = (1.0 + truth.gain_fpn_rel * rng.standard_normal(self.shape))
        self.offset_map = truth.offset_fpn_counts * rng.standard_normal(self.shape)
        order = rng.permutation(npix)
        n_dead = int(round(truth.dead_fraction * npix))
        n_hot = int(round(truth.hot_fraction * npix))
        n_noisy = int(round(truth.noisy_fraction * npix))
        self.bad_pixels = BadPixels(dead=np.sort(order[:n_dead]),
                                    hot=np.sort(order[n_dead:n_dead + n_hot]),
                                    noisy=np.sort(order[n_dead + n_hot:n_dead + n_hot + n_noisy]))
        sigma = np.full(npix, truth.temporal_noise_counts, dtype=np.float32)
        sigma[self.bad_pixels.noisy] *= truth.noisy_factor
        self.sigma_map = sigma.reshape(self.shape)
        self._uniform_sigma = n_noisy == 0
        self._cache: OrderedDict[SceneState, np.ndarray] = OrderedDict()
        self._patterns: OrderedDict[tuple, np.ndarray] = OrderedDict()
        self._cache_size = max(1, cache_size)

    # --- truth -------------------------------------------------------------------------------
    def expected_spots(self, scene: SceneState) -> tuple[np.ndarray, list[tuple[int, int]]]:
        """Exact truth positions (N, 2) as (x, y) px of the pinholes, and their (row, col) labels.

        Empty for targets without pinholes.
        """
        t = scene.target
        if not isinstance(t, (PinholeGrid, SinglePinhole)):
            return np.zeros((0, 2)), []
        px = project_target(self.truth.geometry, t.points_mm(), scene.collimator_focal_mm,
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
        self._patterns[key] = pattern
        if len(self._patterns) > self._cache_size:
            self._patterns.popitem(last=False)
        return pattern

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

    def _edge_fraction(self, scene: SceneState, target: SlantedEdge) -> np.ndarray:
        g = self.truth.geometry
        a = math.radians(target.angle_deg)
        along = np.array([math.sin(a), math.cos(a)])
        normal = np.array([math.cos(a), -math.sin(a)])
        pts = np.array([[0.0, 0.0], 2.0 * along, -2.0 * along, 2.0 * normal])
        px = project_target(g, pts, scene.collimator_focal_mm, scene.az_deg, scene.el_deg)
        direction = px[1] - px[2]
        direction /= np.linalg.norm(direction)
        n_img = np.array([-direction[1], direction[0]])
        if float(n_img @ (px[3] - px[0])) < 0:
            n_img = -n_img
        return pixel_integrated_edge(g.width, g.height, (float(px[0, 0]), float(px[0, 1])),
                                     (float(n_img[0]), float(n_img[1])), self.truth.blur_sigma_px)

    def render_mean(self, scene: SceneState) -> np.ndarray:
        """Expected value of each pixel before the ADC: clean signal through FPN.

        float32, cached per scene (the last few scenes).
        """
        cached = self._cache.get(scene)
        if cached is not None:
            self._cache.move_to_end(scene)
            return cached
        tr = self.truth
        clean = self.render_clean(scene)
        mean = tr.offset_counts + self.offset_map + self.gain_map * (clean - tr.offset_counts)
        mean = mean.astype(np.float32)
        mean.setflags(write=False)
        self._cache[scene] = mean
        if len(self._cache) > self._cache_size:
            self._cache.popitem(last=False)
        return mean

    def render(self, scene: SceneState, frame_index: int) -> np.ndarray:
        """One frame (uint16, [row, col]): mean + temporal noise, ADC rounding and clipping,
        dead and hot pixels. The same (seed, frame_index, scene) always gives the same frame."""
        mean = self.render_mean(scene)
        rng = np.random.Generator(np.random.PCG64(
            np.random.SeedSequence([self.seed, 1, int(frame_index)])))
        buf = rng.standard_normal(self.shape, dtype=np.float32)
        if self._uniform_sigma:
            buf *= self.truth.temporal_noise_counts
        else:
            buf *= self.sigma_map
        buf += mean
        np.rint(buf, out=buf)
        np.clip(buf, 0.0, float(self.truth.full_scale), out=buf)
        frame = buf.astype(np.uint16)
        flat = frame.reshape(-1)
        flat[self.bad_pixels.dead] = 0
        flat[self.bad_pixels.hot] = self.truth.full_scale
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
            "bad_pixels_xy": {k: np.column_stack(np.unravel_index(v, self.shape)[::-1]).tolist()
                              for k, v in (("dead", self.bad_pixels.dead),
                                           ("hot", self.bad_pixels.hot),
                                           ("noisy", self.bad_pixels.noisy))},
        }


def boresight_pixel(truth: CameraTruth, az_deg: float = 0.0, el_deg: float = 0.0,
                    collimator_focal_mm: float = 1000.0) -> np.ndarray:
    """Where the collimator axis lands (x, y) px: the bench's boresight reference."""
    d = collimator_directions(np.zeros((1, 2)), collimator_focal_mm)
    return project(truth.geometry, to_camera_frame(d, az_deg, el_deg))[0]
