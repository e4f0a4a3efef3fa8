"""NETD that can be signed: SiTF at the spec temperature, noise there, bad pixels out, budget.

Method (definitions: NETD = temporal noise / SiTF; noise as the square root of the mean per-pixel
temporal variance, averaging variances rather than standard deviations: Opt. Eng. 29(7), 1990;
common practice):

1. Flats (open aperture) at several absolute source temperatures. With an open aperture the UUT
   sees the source, so the abscissa is the source temperature itself, not source minus reference.
2. Signal per temperature: the mean over frames and over the good pixels (bad pixels masked).
3. SiTF follows Planck's curvature: a linear camera's output is linear in the in-band radiance,
   ``S = a + b L(T)``, fitted by weighted least squares (weights from the temporal noise of each
   mean; reduced chi-square > 1 inflates the covariance, the Birge ratio). The SiTF at the spec
   temperature is ``b dL/dT(T_spec)`` (band radiance and its derivative: analysis.radiometry).
4. Noise at the spec temperature: from the flat taken there (within 0.25 K), else interpolated
   linearly in temperature between the two flats that bracket it (per-pixel variances), else the
   nearest flat, flagged as extrapolated. ADC rounding adds q^2/12 to every variance (Sheppard's
   correction, q = 1 count) and is removed.
5. Uncertainty budget (1 sigma, combined in quadrature, GUM JCGM 100:2008): noise statistics (the
   spread of the per-pixel variances over the good pixels), SiTF statistics (fit covariance) and
   the source temperatures' standard uncertainty (each temperature moved by it, slope refitted).
6. Per-pixel NETD map (per-pixel fit and noise; NaN for bad pixels) and its median. Each pixel's
   noise comes from N frames and scatters as a chi distribution with N - 1 degrees of freedom, so
   the map's median lies below the frame NETD by sqrt(median(chi2_{N-1}) / (N - 1)) (0.95 for 8
   frames); the frame NETD is the one judged.

>>> import numpy as np
>>> from analysis.radiometry import band_radiance
>>> rng = np.random.default_rng(1)
>>> temps = [26.0, 30.0, 34.0]
>>> stacks = [500 + 150 * band_radiance(t + 273.15, (8, 12)) + rng.normal(0, 4.872, (16, 32, 32))
...           for t in temps]
>>> r = measure_netd(temps, stacks, (8, 12), at_c=30.0, quantization_step_counts=None)
>>> abs(r.netd_mk - 50.0) < 3 * r.netd_sigma_mk, round(r.sitf_counts_per_k, 1)
(True, 97.4)
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from analysis.radiometry import band_radiance, band_radiance_derivative
from analysis.stack_stats import temporal_mean_var
from analysis.verdicts import SpecKey, Verdict

SPEC_KEYS = {
    "netd_mk": SpecKey(
        "netd_mk", "NETD", "mK", "max",
        "temporal noise over SiTF, both at the source temperature, bad pixels excluded; SiTF "
        "from a radiance-linear fit of the signal against the absolute source temperature",
        conditions=("source_c", "background_c")),
}

SAME_TEMPERATURE_K = 0.25


@dataclass(frozen=True)
class SitfFit:
    """``S = a + b L(T)`` over the flats; `sitf_at` gives counts per kelvin at any temperature."""

    temperatures_c: tuple[float, ...]
    signal_counts: tuple[float, ...]
    signal_sigma_counts: tuple[float, ...]
    band_um: tuple[float, float]
    intercept_counts: float
    counts_per_radiance: float
    covariance: np.ndarray
    chi2: float
    dof: int

    def radiance(self, t_c: float | np.ndarray) -> np.ndarray:
        return np.asarray(band_radiance(np.asarray(t_c, dtype=float) + 273.15, self.band_um))

    def predict(self, t_c: float | np.ndarray) -> np.ndarray:
        return self.intercept_counts + self.counts_per_radiance * self.radiance(t_c)

    def residuals(self) -> np.ndarray:
        return np.asarray(self.signal_counts) - self.predict(np.asarray(self.temperatures_c))

    def sitf_at(self, t_c: float) -> tuple[float, float]:
        """(SiTF, its 1-sigma statistical uncertainty) in counts per kelvin at `t_c`."""
        dldt = float(band_radiance_derivative(t_c + 273.15, self.band_um))
        return (self.counts_per_radiance * dldt,
                math.sqrt(max(self.covariance[1, 1], 0.0)) * dldt)


@dataclass(frozen=True)
class NetdMeasurement:
    """NETD at one source temperature with its budget, map and every condition."""

    netd_mk: float
    netd_sigma_mk: float
    budget_mk: dict[str, float]
    sitf_counts_per_k: float
    sitf_sigma_counts_per_k: float
    noise_counts: float
    noise_from: str
    extrapolated: bool
    sitf_fit: SitfFit
    netd_map_mk: np.ndarray
    median_netd_mk: float
    conditions: dict[str, Any] = field(default_factory=dict)

    def verdict(self, limit_mk: float, conditions: dict[str, Any] | None = None) -> Verdict:
        cond = {k: self.conditions[k] for k in ("source_c", "background_c", "frames",
                                                 "frame_rate_hz", "f_number", "pixels_used")
                if k in self.conditions}
        if self.extrapolated:
            cond["noise_extrapolated"] = True
        cond.update(conditions or {})
        return SPEC_KEYS["netd_mk"].judge(self.netd_mk, self.netd_sigma_mk, limit_mk, cond)

    def to_dict(self) -> dict[str, Any]:
        fit = self.sitf_fit
        return {"netd_mk": self.netd_mk, "netd_sigma_mk": self.netd_sigma_mk,
                "budget_mk": dict(self.budget_mk), "sitf_counts_per_k": self.sitf_counts_per_k,
                "sitf_sigma_counts_per_k": self.sitf_sigma_counts_per_k,
                "noise_counts": self.noise_counts, "noise_from": self.noise_from,
                "extrapolated": self.extrapolated, "median_netd_mk": self.median_netd_mk,
                "sitf_fit": {"model": "S = a + b L_band(T_source)",
                             "temperatures_c": list(fit.temperatures_c),
                             "signal_counts": list(fit.signal_counts),
                             "signal_sigma_counts": list(fit.signal_sigma_counts),
                             "residuals_counts": fit.residuals().tolist(),
                             "intercept_counts": fit.intercept_counts,
                             "counts_per_radiance": fit.counts_per_radiance,
                             "chi2": fit.chi2, "dof": fit.dof, "band_um": list(fit.band_um)},
                "conditions": dict(self.conditions)}


def fit_sitf_radiance(temperatures_c: Sequence[float], signal_counts: Sequence[float],
                      signal_sigma_counts: Sequence[float], band_um: tuple[float, float]
                      ) -> SitfFit:
    """Weighted least squares of signal against in-band radiance (see the module docstring)."""
    t = np.asarray(temperatures_c, dtype=float)
    s = np.asarray(signal_counts, dtype=float)
    sig = np.asarray(signal_sigma_counts, dtype=float)
    if len(t) < 2 or np.ptp(t) <= 0:
        raise ValueError("NETD: SiTF needs flats at two or more different source temperatures")
    sig = np.where(sig > 0, sig, max(float(sig.max()), 1e-6))
    x = np.asarray(band_radiance(t + 273.15, band_um))
    design = np.column_stack([np.ones_like(x), x]) / sig[:, None]
    coef, *_ = np.linalg.lstsq(design, s / sig, rcond=None)
    cov = np.linalg.inv(design.T @ design)
    res = (s - (coef[0] + coef[1] * x)) / sig
    dof = len(t) - 2
    chi2 = float(res @ res)
    if dof > 0 and chi2 / dof > 1.0:
        cov = cov * (chi2 / dof)
    return SitfFit(tuple(t.tolist()), tuple(s.tolist()), tuple(sig.tolist()),
                   (float(band_um[0]), float(band_um[1])), float(coef[0]), float(coef[1]), cov,
                   chi2, dof)


def _noise_variance_at(at_c: float, temps: np.ndarray, var_maps: list[np.ndarray]
                       ) -> tuple[np.ndarray, str, bool, list[tuple[int, float]]]:
    """Per-pixel variance at `at_c`: from the flat there, between two, or the nearest."""
    near = np.flatnonzero(np.abs(temps - at_c) <= SAME_TEMPERATURE_K)
    if len(near):
        w = [(int(i), 1.0 / len(near)) for i in near]
        return (sum(var_maps[i] for i in near) / len(near),
                f"flat at {temps[near[0]]:g} C", False, w)
    below = np.flatnonzero(temps < at_c)
    above = np.flatnonzero(temps > at_c)
    if len(below) and len(above):
        i = int(below[np.argmax(temps[below])])
        j = int(above[np.argmin(temps[above])])
        f = (at_c - temps[i]) / (temps[j] - temps[i])
        return ((1 - f) * var_maps[i] + f * var_maps[j],
                f"interpolated between {temps[i]:g} C and {temps[j]:g} C", False,
                [(i, 1 - f), (j, f)])
    k = int(np.argmin(np.abs(temps - at_c)))
    return var_maps[k], f"nearest flat at {temps[k]:g} C (extrapolated)", True, [(k, 1.0)]


def measure_netd(temperatures_c: Sequence[float], stacks: Sequence[np.ndarray],
                 band_um: tuple[float, float], *, at_c: float,
                 background_c: float | None = None, bad_pixel_mask: np.ndarray | None = None,
                 source_temperature_sigma_k: float = 0.0,
                 quantization_step_counts: float | None = 1.0,
                 frame_rate_hz: float | None = None, f_number: float | None = None,
                 conditions: dict[str, Any] | None = None) -> NetdMeasurement:
    """NETD at source temperature `at_c` from open-aperture stacks (frames, rows, cols), one per
    entry of `temperatures_c` (absolute source temperatures, C). See the module docstring."""
    temps = np.asarray(temperatures_c, dtype=float)
    if len(temps) != len(stacks):
        raise ValueError(f"NETD: {len(temps)} temperatures but {len(stacks)} stacks")
    means, var_maps, frames = [], [], []
    shape = None
    q2 = (quantization_step_counts ** 2 / 12.0) if quantization_step_counts else 0.0
    for t, st in zip(temps, stacks):
        a = np.asarray(st)
        if a.ndim != 3 or a.shape[0] < 2:
            raise ValueError(f"NETD: the flat at {t:g} C must be a stack (frames, rows, cols) "
                             f"of 2 or more frames, got shape {a.shape}")
        if shape is not None and a.shape[1:] != shape:
            raise ValueError(f"NETD: the flat at {t:g} C is {a.shape[1:]}, others {shape}")
        shape = a.shape[1:]
        mean, var = temporal_mean_var(a)
        means.append(mean)
        var_maps.append(np.maximum(var - q2, 0.0))
        frames.append(int(a.shape[0]))
    good = np.ones(shape, dtype=bool) if bad_pixel_mask is None else ~np.asarray(
        bad_pixel_mask, dtype=bool)
    for m in means:
        good &= np.isfinite(m)
    n_good = int(good.sum())
    if n_good < 2:
        raise ValueError("NETD: fewer than 2 good pixels left after the bad-pixel mask")
    signal = [float(m[good].mean()) for m in means]
    sig_signal = [math.sqrt(float(v[good].mean()) / (n * n_good))
                  for v, n in zip(var_maps, frames)]
    fit = fit_sitf_radiance(temps, signal, sig_signal, band_um)
    sitf, u_sitf_stat = fit.sitf_at(at_c)
    if not sitf > 0:
        raise ValueError(f"NETD: SiTF at {at_c:g} C is {sitf:.4g} counts/K; the camera shows no "
                         "rising response to the source")
    # source temperature uncertainty: move each temperature by its sigma, refit
    u_sitf_temp = 0.0
    if source_temperature_sigma_k > 0:
        acc = 0.0
        for i in range(len(temps)):
            moved = temps.copy()
            moved[i] += source_temperature_sigma_k
            s2, _ = fit_sitf_radiance(moved, signal, sig_signal, band_um).sitf_at(at_c)
            acc += (s2 - sitf) ** 2
        u_sitf_temp = math.sqrt(acc)
    var_map, noise_from, extrapolated, weights = _noise_variance_at(at_c, temps, var_maps)
    mean_var = float(var_map[good].mean())
    noise = math.sqrt(mean_var)
    # uncertainty of the mean variance: the per-pixel variances' spread / sqrt(pixels), per
    # flat used, weighted as combined
    u_mean_var = math.sqrt(sum((w * float(np.std(var_maps[i][good], ddof=1))) ** 2 / n_good
                               for i, w in weights))
    netd = noise / sitf
    rel = {"noise statistics": 0.5 * u_mean_var / mean_var,
           "SiTF statistics": u_sitf_stat / sitf,
           "source temperature": u_sitf_temp / sitf}
    budget = {k: 1000.0 * netd * v for k, v in rel.items()}
    sigma = math.sqrt(sum(v * v for v in budget.values()))
    # per-pixel map: per-pixel slope against radiance, noise at at_c
    x = np.asarray(band_radiance(temps + 273.15, band_um))
    xc = x - x.mean()
    stack_means = np.stack(means)
    slope = np.tensordot(xc, stack_means - stack_means.mean(axis=0), axes=1) / float(xc @ xc)
    dldt = float(band_radiance_derivative(at_c + 273.15, band_um))
    with np.errstate(divide="ignore", invalid="ignore"):
        pix = 1000.0 * np.sqrt(var_map) / (slope * dldt)
    pix = np.where(good & (slope > 0), pix, np.nan)
    cond: dict[str, Any] = {
        "source_c": at_c, "background_c": background_c,
        "flat_temperatures_c": temps.tolist(), "frames": frames,
        "frame_rate_hz": frame_rate_hz, "f_number": f_number, "band_um": list(band_um),
        "pixels_used": n_good, "pixels_masked": int(good.size - n_good),
        "noise_from": noise_from, "sitf_model": "S = a + b L_band(T_source), open aperture",
        "quantization_correction_counts2": q2,
        "source_temperature_sigma_k": source_temperature_sigma_k,
        "brackets_source": bool(temps.min() <= at_c <= temps.max()), **(conditions or {})}
    return NetdMeasurement(netd_mk=1000.0 * netd, netd_sigma_mk=sigma, budget_mk=budget,
                           sitf_counts_per_k=sitf,
                           sitf_sigma_counts_per_k=math.hypot(u_sitf_stat, u_sitf_temp),
                           noise_counts=noise, noise_from=noise_from, extrapolated=extrapolated,
                           sitf_fit=fit, netd_map_mk=pix,
                           median_netd_mk=float(np.nanmedian(pix)), conditions=cond)
