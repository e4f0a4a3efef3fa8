"""SiTF and NETD against synthetic data of known slope and noise (closed forms)."""

import numpy as np
import pytest

from analysis.sitf import fit_sitf, netd, temporal_noise


def test_sitf_slope_recovered_from_noisy_means():
    # A linear response of 120 counts/K plus small mean errors: the least-squares slope has the
    # standard error sigma / sqrt(sum((x - xbar)^2)) (ordinary least squares, any statistics text).
    rng = np.random.default_rng(3)
    dt = np.array([-5.0, -2.0, 2.0, 5.0, 10.0])
    sigma = 0.5
    signal = 120.0 * dt + 8000.0 + rng.normal(0, sigma, dt.size)
    result = fit_sitf(dt, signal)
    se = sigma / np.sqrt(np.sum((dt - dt.mean()) ** 2))
    assert result.sitf_counts_per_k == pytest.approx(120.0, abs=4 * se)
    assert result.r_squared > 0.9999


def test_netd_is_noise_over_sitf_within_chi_square_tolerance():
    # Gaussian temporal noise of 6 counts, SiTF 120 counts/K -> NETD 50 mK. The pooled variance
    # over P pixels and N frames has relative standard error sqrt(2 / (P (N - 1))) (chi-square).
    rng = np.random.default_rng(5)
    frames, rows, cols = 32, 40, 50
    stack = 5000.0 + rng.normal(0, 6.0, (frames, rows, cols))
    result = netd(stack, 120.0)
    rel = np.sqrt(2.0 / (rows * cols * (frames - 1))) / 2  # on the standard deviation
    assert result.netd_k == pytest.approx(0.05, rel=5 * rel)


def test_noise_averages_variances_not_standard_deviations():
    # Half the pixels with noise 2, half with 10: sqrt(mean var) = sqrt(52) ~ 7.21, while the mean
    # of standard deviations would be 6 (common practice: average variances).
    rng = np.random.default_rng(9)
    stack = np.concatenate([rng.normal(0, 2, (400, 20, 10)), rng.normal(0, 10, (400, 20, 10))],
                           axis=2)
    assert temporal_noise(stack) == pytest.approx(np.sqrt(52.0), rel=0.02)


def test_uniformity_recovers_gain_spread_and_bad_pixels():
    # A flat field of 8000 counts with 1 % Gaussian gain spread gives 1 % non-uniformity (the
    # sample standard deviation of a normal sample has relative error ~ 1/sqrt(2n)); 25 planted
    # dead pixels are found exactly (common practice: outliers beyond a robust 6 sigma).
    from analysis.uniformity import uniformity

    rng = np.random.default_rng(11)
    frame = 8000.0 * (1 + rng.normal(0, 0.01, (128, 160)))
    idx = rng.choice(frame.size, 25, replace=False)
    frame.flat[idx] = 0.0
    result = uniformity(frame)
    assert result.bad_pixels == 25
    assert result.nonuniformity_percent == pytest.approx(1.0, rel=4 / np.sqrt(2 * frame.size))
