"""Image-quality plots (analysis/iq_plots.py) and the doctest examples of the new modules."""

from __future__ import annotations

import doctest
import subprocess
import sys

import numpy as np
import pytest

import analysis.badpixels
import analysis.mtf
import analysis.netd
import analysis.noise3d
import analysis.optics
import analysis.uniformity
from analysis.badpixels import bad_pixel_map
from analysis.mtf import slanted_edge_mtf
from analysis.netd import measure_netd
from analysis.noise3d import noise_3d
from analysis.radiometry import band_radiance


@pytest.mark.parametrize("module", [analysis.badpixels, analysis.mtf, analysis.netd,
                                    analysis.noise3d, analysis.optics, analysis.uniformity])
def test_docstring_examples_run(module: object) -> None:
    failed, attempted = doctest.testmod(module, verbose=False)
    assert attempted > 0 and failed == 0


def test_plots_are_written(tmp_path) -> None:
    from analysis import iq_plots
    from scipy.special import ndtr

    rng = np.random.default_rng(2)
    yy, xx = np.mgrid[:120, :90]
    edge = 100 + 1000 * ndtr((xx - 45 - 0.09 * (yy - 60)) / 0.7) + rng.normal(0, 2, (120, 90))
    sfr = slanted_edge_mtf(edge, pixel_pitch_um=17.0, focal_length_mm=25.0)
    temps = [26.0, 30.0, 34.0]
    stacks = [500 + 150 * band_radiance(t + 273.15, (8, 12)) + rng.normal(0, 4.9, (8, 40, 50))
              for t in temps]
    stacks[0][:, 3, 4] = stacks[2][:, 3, 4] = 0.0
    bad = bad_pixel_map(stacks[0], stacks[-1])
    netd = measure_netd(temps, stacks, (8, 12), at_c=30.0, bad_pixel_mask=bad.mask)
    n3 = noise_3d(stacks[1][:, 5:, 5:], netd.sitf_counts_per_k)
    paths = [iq_plots.plot_mtf([sfr], tmp_path / "mtf.png", spec_min_at_nyquist=0.15),
             iq_plots.plot_mtf_through_field([sfr], edge.shape, tmp_path / "mtf_field.png",
                                             spec_min_at_nyquist=0.15),
             iq_plots.plot_bad_pixels(bad, tmp_path / "bad_pixels.png"),
             iq_plots.plot_sitf(netd, tmp_path / "sitf.png"),
             iq_plots.plot_netd_map(netd, tmp_path / "netd_map.png"),
             iq_plots.plot_noise3d(n3, tmp_path / "noise3d.png")]
    for p in paths:
        data = p.read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 5000, p


def test_importing_the_plot_module_does_not_import_matplotlib() -> None:
    code = "import sys, analysis.iq_plots; print('matplotlib' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    assert out.stdout.strip() == "False"
