"""Image-quality plots (analysis/iq_plots.py, SVG) read back with the standard XML parser, and
the doctest examples of the new modules.

References: the embedded PNGs are decoded by Pillow (an independent PNG reader); map colours
are checked against matplotlib's published viridis table; tick steps against Heckbert's nice
numbers; marker counts against the results themselves.
"""

from __future__ import annotations

import base64
import doctest
import io
import subprocess
import sys
import xml.etree.ElementTree as ET

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


SVG = "{http://www.w3.org/2000/svg}"


@pytest.fixture(scope="module")
def inputs():
    """A small slanted edge and three flats of 40 x 50 with one dead pixel at (x 4, y 3)."""
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
    return {"sfr": sfr, "edge_shape": edge.shape, "bad": bad, "netd": netd, "n3": n3}


@pytest.fixture(scope="module")
def svgs(inputs, tmp_path_factory) -> dict[str, ET.Element]:
    from analysis import iq_plots

    d = tmp_path_factory.mktemp("iq")
    paths = {"mtf": iq_plots.plot_mtf([inputs["sfr"]], d / "mtf.svg", spec_min_at_nyquist=0.15),
             "mtf_field": iq_plots.plot_mtf_through_field([inputs["sfr"]], inputs["edge_shape"],
                                                          d / "mtf_field.svg",
                                                          spec_min_at_nyquist=0.15),
             "bad": iq_plots.plot_bad_pixels(inputs["bad"], d / "bad_pixels.svg"),
             "sitf": iq_plots.plot_sitf(inputs["netd"], d / "sitf.svg"),
             "netd_map": iq_plots.plot_netd_map(inputs["netd"], d / "netd_map.svg"),
             "noise3d": iq_plots.plot_noise3d(inputs["n3"], d / "noise3d.svg")}
    return {k: ET.parse(p).getroot() for k, p in paths.items()}  # raises on malformed XML


def group(root: ET.Element, cls: str) -> list[ET.Element]:
    return [g for g in root.iter(f"{SVG}g") if g.get("class") == cls]


def texts(root: ET.Element, cls: str | None = None) -> list[str]:
    return ["".join(t.itertext()) for t in root.iter(f"{SVG}text")
            if cls is None or t.get("class") == cls]


def embedded_image(root: ET.Element, cls: str) -> tuple[ET.Element, np.ndarray]:
    """The <image> of that class and its PNG decoded by Pillow (an independent PNG reader)."""
    from PIL import Image

    (el,) = [i for i in root.iter(f"{SVG}image") if i.get("class") == cls]
    href = el.get("href")
    assert href.startswith("data:image/png;base64,")
    img = Image.open(io.BytesIO(base64.b64decode(href.split(",", 1)[1])))
    img.load()
    assert img.mode == "RGB"
    return el, np.asarray(img)


def test_every_plot_keeps_its_title_and_axis_labels(svgs) -> None:
    assert "MTF (ISO 12233 slanted edge)" in texts(svgs["mtf"])
    assert {"spatial frequency (cycles/pixel)", "MTF", "cycles/mm"} <= set(texts(svgs["mtf"]))
    assert "MTF at Nyquist" in texts(svgs["mtf_field"], "cbar-label")
    assert any(t.startswith("bad pixels: 1 (0.050 %)") for t in texts(svgs["bad"]))
    assert {"signal (counts)", "residual (counts)", "source temperature (C)"} <= set(
        texts(svgs["sitf"]))
    assert any(t.startswith("SiTF ") and t.endswith("counts/K at 30 C") for t in texts(svgs["sitf"]))
    assert texts(svgs["netd_map"], "cbar-label") == ["NETD (mK)"]
    assert "sigma (mK)" in texts(svgs["noise3d"], "ylabel")
    for root in svgs.values():
        assert root.find(f"{SVG}desc") is not None


def test_netd_map_pixels_are_the_colour_scale_at_their_value(inputs, svgs) -> None:
    # Reference: matplotlib's 256-entry viridis table (van der Walt and Smith, 2015); our
    # 17-stop interpolation stays within 6/255 of it (test_svg_plot).
    from matplotlib import colormaps

    m = inputs["netd"].netd_map_mk
    el, rgb = embedded_image(svgs["netd_map"], "netd-map")
    assert rgb.shape == m.shape + (3,)  # one image pixel per detector pixel
    assert "pixelated" in el.get("style")
    # the colour bar spans the 1st..99th percentile (the plot says so); pick in-range pixels
    lo, hi = np.percentile(m[np.isfinite(m)], [1, 99])
    table = np.asarray(colormaps["viridis"].colors)
    for y, x in [(10, 20), (30, 7), (0, 49), (39, 0)]:
        t = float(np.clip((m[y, x] - lo) / (hi - lo), 0, 1))
        ref = np.round(255 * table[round(t * 255)])
        assert np.abs(rgb[y, x].astype(int) - ref).max() <= 8, (y, x)  # 6 + half a table step
    # the dead pixel has no NETD: drawn in the stated neutral colour, white
    assert not np.isfinite(m[3, 4]) and rgb[3, 4].tolist() == [255, 255, 255]
    # displayed at an integer zoom with square pixels and the stated extent
    w, h = float(el.get("width")), float(el.get("height"))
    assert w / m.shape[1] == pytest.approx(h / m.shape[0]) and (w / m.shape[1]) % 1 == 0
    assert "per-pixel NETD (bad pixels white: 1)" in texts(svgs["netd_map"])


def test_bad_pixel_map_shows_each_bad_pixel_in_its_colour(inputs, svgs) -> None:
    from analysis.iq_plots import BAD_COLOURS, GOOD_COLOUR

    bad = inputs["bad"]
    _, rgb = embedded_image(svgs["bad"], "bad-pixel-map")
    assert rgb.shape == bad.shape + (3,)
    dead = tuple(int(BAD_COLOURS["dead"][k:k + 2], 16) for k in (1, 3, 5))
    good = tuple(int(GOOD_COLOUR[k:k + 2], 16) for k in (1, 3, 5))
    assert tuple(rgb[3, 4]) == dead and bad.dead[3, 4]
    n_colour = int((rgb != np.array(good)).any(axis=2).sum())
    assert n_colour == bad.count  # every bad pixel coloured, no other pixel
    for kind in ("dead", "hot", "noisy", "unresponsive"):  # one ring per bad pixel and class
        (g,) = group(svgs["bad"], f"bad-{kind}")
        assert len(g) == len(bad.positions(kind))
    assert any(t == f"dead: {len(bad.positions('dead'))}" for t in texts(svgs["bad"]))


def test_markers_and_bars_count_the_points(inputs, svgs) -> None:
    fit = inputs["netd"].sitf_fit
    (pts,) = group(svgs["sitf"], "points")
    (res,) = group(svgs["sitf"], "residuals")
    (bars,) = group(svgs["sitf"], "residual-errorbars")
    assert len(pts) == len(res) == len(bars) == len(fit.temperatures_c)
    (comp,) = group(svgs["noise3d"], "components")
    assert len(comp) == 7  # t, v, h, tv, th, vh, tvh (D'Agostino and Webb, 1991)
    assert texts(svgs["noise3d"], "xtick") == ["t", "v", "h", "tv", "th", "vh", "tvh"]
    (hist,) = group(svgs["netd_map"], "histogram")
    assert len(hist) <= 80
    assert len(group(svgs["mtf_field"], "edges")) == 1
    assert len(group(svgs["mtf_field"], "below-spec")) == 1  # 0.09 at Nyquist < 0.15


def test_tick_values_are_nice(svgs) -> None:
    # Heckbert, "Nice numbers for graph labels" (Graphics Gems, 1990): steps 1, 2, 5 x 10^n.
    # Ticks of one axes increase; a drop starts the next axes of the same figure.
    for name in ("mtf", "sitf", "netd_map", "bad", "noise3d"):
        for cls in ("xtick", "ytick"):
            if name == "noise3d" and cls == "xtick":
                continue  # category names
            vals = [float(t.replace("\u2212", "-")) for t in texts(svgs[name], cls)]
            steps = [d for d in np.diff(vals) if d > 0]
            assert len(vals) >= 3 and steps, (name, cls, vals)
            for step in steps:
                mant = step / 10.0 ** np.floor(np.log10(step) + 1e-12)
                assert min(abs(mant - m) for m in (1.0, 2.0, 5.0, 10.0)) < 1e-6, (name, cls, step)


def test_png_writer_round_trips_through_an_independent_decoder() -> None:
    from PIL import Image

    from analysis.svg_plot import png_bytes

    a = np.random.default_rng(5).integers(0, 256, (7, 11, 3), dtype=np.uint8)
    img = Image.open(io.BytesIO(png_bytes(a)))
    img.load()
    assert img.size == (11, 7) and np.array_equal(np.asarray(img), a)


def test_drawing_the_plots_imports_no_plotting_library(tmp_path) -> None:
    code = ("import sys, numpy as np\n"
            "from analysis import iq_plots\n"
            "from analysis.badpixels import bad_pixel_map\n"
            "r = np.random.default_rng(0)\n"
            "a, b = r.normal(100, 1, (4, 20, 30)), r.normal(200, 1, (4, 20, 30))\n"
            f"iq_plots.plot_bad_pixels(bad_pixel_map(a, b), {str(tmp_path / 'b.svg')!r})\n"
            "print(sorted(m for m in sys.modules if m.split('.')[0] in ('matplotlib', 'PIL')))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    assert out.stdout.strip() == "[]"
