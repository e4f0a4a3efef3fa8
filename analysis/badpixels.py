"""Bad-pixel map and operability from flat fields at two source temperatures.

Inputs: two stacks (frames, rows, cols) of open-aperture frames, one at a cooler and one at a
warmer source. Per pixel: its mean level at the cool flat, its response (warm mean minus cool
mean) and its temporal noise (square root of the mean of its two temporal variances). Each map
is compared with its smooth trend (a quadratic surface fitted with outlier clipping, so
vignetting or shading is not taken for bad pixels) and with robust statistics (median, and
1.4826 x MAD as the robust sigma: common practice).

Criteria, applied in this order (one class per pixel; the defaults are stated in the result):

* hot: the cool-flat level lies above its trend by more than `n_sigma` robust sigmas of the
  fixed pattern (includes pixels stuck at full scale);
* dead: response below `dead_max_response` (10 %) of the trend's response (no response);
* non-responsive: response outside `responsivity_band` (50 % .. 150 %) of the trend's response
  (a usual operability definition for infrared focal planes; common practice, from memory);
* noisy: temporal noise above `noisy_factor` (2.5) times the median temporal noise.

Clusters are groups of bad pixels touching by side or corner (8-connectivity). Operability is
the percentage of pixels that are not bad: 100 (1 - bad / all).

>>> import numpy as np
>>> rng = np.random.default_rng(0)
>>> cold = 1000 + rng.normal(0, 2, (8, 40, 50)); warm = cold + 500
>>> cold[:, 5, 7] = 0; warm[:, 5, 7] = 0
>>> m = bad_pixel_map(cold, warm)
>>> m.positions("dead").tolist(), round(m.operability_percent, 2)
([[7, 5]], 99.95)
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from analysis.stack_stats import temporal_mean_var
from analysis.verdicts import SpecKey, Verdict

KINDS = ("dead", "hot", "noisy", "unresponsive")
BIT = {"dead": 1, "hot": 2, "noisy": 4, "unresponsive": 8}

SPEC_KEYS = {
    "max_bad_pixel_percent": SpecKey(
        "max_bad_pixel_percent", "bad pixels", "%", "max",
        "dead, hot, noisy and non-responsive pixels as a percentage of all pixels, from flats "
        "at two source temperatures", conditions=("cool_c", "warm_c")),
    "min_operability_percent": SpecKey(
        "min_operability_percent", "operability", "%", "min",
        "percentage of pixels that are not bad", conditions=("cool_c", "warm_c")),
    "max_cluster_size": SpecKey(
        "max_cluster_size", "largest bad-pixel cluster", "px", "max",
        "pixels in the largest 8-connected group of bad pixels", conditions=("cool_c", "warm_c")),
}


@dataclass(frozen=True)
class BadPixelCriteria:
    """Thresholds of the four classes (see the module docstring)."""

    n_sigma: float = 8.0
    dead_max_response: float = 0.1
    responsivity_band: tuple[float, float] = (0.5, 1.5)
    noisy_factor: float = 2.5

    def describe(self) -> dict[str, str]:
        lo, hi = self.responsivity_band
        return {
            "hot": f"cool-flat level above its trend by more than {self.n_sigma:g} robust sigmas "
                   "(1.4826 MAD) of the fixed pattern",
            "dead": f"response below {100 * self.dead_max_response:g} % of the trend's response",
            "unresponsive": f"response outside {100 * lo:g} % .. {100 * hi:g} % of the trend's "
                            "response",
            "noisy": f"temporal noise above {self.noisy_factor:g} x the median temporal noise",
        }


@dataclass(frozen=True)
class BadPixelMap:
    """Boolean maps (rows, cols) of each class, with the clusters and the conditions."""

    dead: np.ndarray
    hot: np.ndarray
    noisy: np.ndarray
    unresponsive: np.ndarray
    criteria: dict[str, str]
    cluster_sizes: np.ndarray
    cluster_centres_xy: np.ndarray
    median_response_counts: float
    median_noise_counts: float
    conditions: dict[str, Any] = field(default_factory=dict)

    @property
    def mask(self) -> np.ndarray:
        """True where a pixel is bad, of any class."""
        return self.dead | self.hot | self.noisy | self.unresponsive

    @property
    def shape(self) -> tuple[int, int]:
        return self.dead.shape

    @property
    def count(self) -> int:
        return int(self.mask.sum())

    @property
    def bad_percent(self) -> float:
        return 100.0 * self.count / self.mask.size

    @property
    def operability_percent(self) -> float:
        return 100.0 - self.bad_percent

    @property
    def largest_cluster(self) -> int:
        return int(self.cluster_sizes.max()) if len(self.cluster_sizes) else 0

    def positions(self, kind: str) -> np.ndarray:
        """(N, 2) positions (x, y) = (column, row) of one class, row-major order."""
        rows, cols = np.nonzero(getattr(self, kind))
        return np.column_stack([cols, rows])

    def codes(self) -> np.ndarray:
        """uint8 map: bit 1 dead, 2 hot, 4 noisy, 8 non-responsive, 0 good."""
        out = np.zeros(self.shape, dtype=np.uint8)
        for k in KINDS:
            out[getattr(self, k)] |= BIT[k]
        return out

    def cluster_histogram(self) -> dict[int, int]:
        sizes, counts = np.unique(self.cluster_sizes, return_counts=True)
        return {int(s): int(c) for s, c in zip(sizes, counts)}

    def verdicts(self, limits: dict[str, float]) -> list[Verdict]:
        """Judge whichever of this analysis' spec keys `limits` holds (counts are exact: 0)."""
        values = {"max_bad_pixel_percent": self.bad_percent,
                  "min_operability_percent": self.operability_percent,
                  "max_cluster_size": float(self.largest_cluster)}
        cond = {k: v for k, v in self.conditions.items() if k in ("cool_c", "warm_c", "frames")}
        return [SPEC_KEYS[k].judge(values[k], 0.0, float(limits[k]), cond)
                for k in SPEC_KEYS if k in limits]

    def to_dict(self, max_listed: int = 200) -> dict[str, Any]:
        listed = {k: self.positions(k)[:max_listed].tolist() for k in KINDS}
        big = np.argsort(-self.cluster_sizes, kind="stable")[:max_listed]
        return {"rows": self.shape[0], "cols": self.shape[1],
                "counts": {k: int(getattr(self, k).sum()) for k in KINDS},
                "bad_pixels": self.count, "bad_percent": self.bad_percent,
                "operability_percent": self.operability_percent,
                "clusters": len(self.cluster_sizes), "largest_cluster": self.largest_cluster,
                "cluster_size_histogram": {str(k): v for k, v in
                                           self.cluster_histogram().items()},
                "largest_clusters": [{"size": int(self.cluster_sizes[i]),
                                      "centre_xy": self.cluster_centres_xy[i].tolist()}
                                     for i in big],
                "positions_xy": listed, "criteria": dict(self.criteria),
                "median_response_counts": self.median_response_counts,
                "median_noise_counts": self.median_noise_counts,
                "conditions": dict(self.conditions)}


def _trend(img: np.ndarray, valid: np.ndarray, step: int = 8) -> np.ndarray:
    """Quadratic surface fitted to `img` on `valid` pixels (every `step`-th row and column),
    clipped twice at 5 robust sigmas."""
    rows, cols = img.shape
    yy, xx = np.mgrid[0:rows:step, 0:cols:step]
    v = img[::step, ::step].ravel()
    ok = valid[::step, ::step].ravel() & np.isfinite(v)
    x = (xx.ravel() - cols / 2.0) / cols
    y = (yy.ravel() - rows / 2.0) / rows
    design = np.column_stack([np.ones_like(x), x, y, x * x, x * y, y * y])
    coef = np.zeros(6)
    for _ in range(3):
        if ok.sum() < 12:
            coef = np.array([np.median(v[np.isfinite(v)]), 0, 0, 0, 0, 0], dtype=float)
            break
        coef, *_ = np.linalg.lstsq(design[ok], v[ok], rcond=None)
        res = v - design @ coef
        s = 1.4826 * np.median(np.abs(res[ok]))
        ok = ok & (np.abs(res) <= 5.0 * s) if s > 0 else ok
    fy, fx = np.mgrid[0:rows, 0:cols]
    X = (fx - cols / 2.0) / cols
    Y = (fy - rows / 2.0) / rows
    return (coef[0] + coef[1] * X + coef[2] * Y + coef[3] * X * X + coef[4] * X * Y
            + coef[5] * Y * Y)


def _mean_var(stack: np.ndarray, what: str) -> tuple[np.ndarray, np.ndarray]:
    s = np.asarray(stack)
    if s.ndim != 3 or s.shape[0] < 2:
        raise ValueError(f"bad pixels: the {what} flat must be a stack (frames, rows, cols) of 2 "
                         f"or more frames, got shape {s.shape}")
    return temporal_mean_var(s)


def bad_pixel_map(stack_cool: np.ndarray, stack_warm: np.ndarray, *,
                  criteria: BadPixelCriteria = BadPixelCriteria(),
                  conditions: dict[str, Any] | None = None) -> BadPixelMap:
    """Classify every pixel from a cool and a warm flat-field stack (see the module docstring)."""
    from scipy import ndimage

    m1, v1 = _mean_var(stack_cool, "cool")
    m2, v2 = _mean_var(stack_warm, "warm")
    if m1.shape != m2.shape:
        raise ValueError(f"bad pixels: the flats differ in size ({m1.shape} and {m2.shape})")
    response = m2 - m1
    if not np.median(response) > 0:
        raise ValueError("bad pixels: the warm flat is not brighter than the cool one; check the "
                         "source temperatures (open aperture, two different temperatures)")
    noise = np.sqrt(0.5 * (v1 + v2))
    c = criteria
    # level: hot pixels stand out above the fixed pattern
    valid = np.ones(m1.shape, dtype=bool)
    level_res = m1 - _trend(m1, valid)
    sig_level = 1.4826 * float(np.median(np.abs(level_res - np.median(level_res))))
    sig_level = max(sig_level, 1e-9)
    hot = level_res > c.n_sigma * sig_level
    # response relative to its trend (fitted away from the level outliers)
    ratio = response / _trend(response, ~hot & (np.abs(level_res) < c.n_sigma * sig_level))
    dead = ~hot & (ratio < c.dead_max_response)
    lo, hi = c.responsivity_band
    unresponsive = ~hot & ~dead & ((ratio < lo) | (ratio > hi))
    good_noise = ~(hot | dead | unresponsive)
    med_noise = float(np.median(noise[good_noise])) if good_noise.any() else 0.0
    noisy = good_noise & (noise > c.noisy_factor * med_noise)
    mask = hot | dead | unresponsive | noisy
    labels, n = ndimage.label(mask, structure=np.ones((3, 3), dtype=bool))
    if n:
        sizes = np.bincount(labels.ravel())[1:]
        centres = np.array(ndimage.center_of_mass(mask, labels, np.arange(1, n + 1)))[:, ::-1]
    else:
        sizes, centres = np.zeros(0, dtype=int), np.zeros((0, 2))
    cond = {"frames": [int(np.shape(stack_cool)[0]), int(np.shape(stack_warm)[0])],
            **(conditions or {})}
    return BadPixelMap(dead=dead, hot=hot, noisy=noisy, unresponsive=unresponsive,
                       criteria=c.describe(), cluster_sizes=sizes.astype(int),
                       cluster_centres_xy=centres,
                       median_response_counts=float(np.median(response[good_noise])),
                       median_noise_counts=med_noise, conditions=cond)


def write_mask_tiff(path: str | Path, bad: BadPixelMap) -> Path:
    """Write the class codes (uint8: 1 dead, 2 hot, 4 noisy, 8 non-responsive, 0 good) as a
    TIFF; the image description says so in JSON, with the criteria."""
    import tifffile

    p = Path(path)
    description = json.dumps({"bad_pixel_codes": BIT, "criteria": bad.criteria,
                              "operability_percent": bad.operability_percent})
    tifffile.imwrite(p, bad.codes(), description=description)
    return p


def read_mask_tiff(path: str | Path) -> np.ndarray:
    """The bad-pixel mask (True = bad) of a TIFF written by `write_mask_tiff` (any non-zero)."""
    import tifffile

    return tifffile.imread(Path(path)) != 0
