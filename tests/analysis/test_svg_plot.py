"""The small SVG writer: nice ticks, the data-to-pixel transform, escaping, the colour map and
the file itself.

References: tick values from Heckbert's loose-labelling algorithm (P. Heckbert, "Nice numbers
for graph labels", Graphics Gems, Academic Press 1990, pp. 61-63), worked by hand in the comment
beside each case; the viridis colours against matplotlib's published 256-entry table; the file
read back with the standard library's XML parser (W3C XML 1.0, SVG 1.1).
"""

from __future__ import annotations

import os
import stat
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from analysis.svg_plot import (Figure, escape, nice_number, nice_ticks, tick_label, viridis)

SVG = "{http://www.w3.org/2000/svg}"


@pytest.mark.parametrize(("x", "round_", "expected"), [
    (0.87, False, 1.0),   # f = 8.7 > 5 -> 10 x 10^-1
    (0.25, True, 0.2),    # f = 2.5 < 3 -> 2 x 10^-1
    (3.2, True, 5.0),     # 3 <= f < 7 -> 5
    (7.0, True, 10.0),    # f >= 7 -> 10
    (1.49, True, 1.0),    # f < 1.5 -> 1
    (438.0, False, 500.0),  # 2 < f = 4.38 <= 5 -> 5 x 10^2
    (2.0, False, 2.0),    # f <= 2 -> 2 (ceiling keeps an exact nice number)
])
def test_nice_number_follows_heckbert(x: float, round_: bool, expected: float) -> None:
    assert nice_number(x, round_) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize(("lo", "hi", "n", "expected", "nfrac"), [
    # range = nice(0.87) = 1; d = nice_round(1/4 = 0.25) = 0.2; floor(0/0.2) .. ceil(0.87/0.2) = 5
    (0.0, 0.87, 5, [0.0, 0.2, 0.4, 0.6, 0.8, 1.0], 1),
    # range = nice(438) = 500; d = nice_round(125) = 100; 1 .. ceil(5.43) = 6
    (105.0, 543.0, 5, [100.0, 200.0, 300.0, 400.0, 500.0, 600.0], 0),
    # range = nice(7.8) = 10; d = nice_round(1.25) = 1; -4 .. 4
    (-3.9, 3.9, 9, [float(k) for k in range(-4, 5)], 0),
    # range = nice(640) = 1000; d = nice_round(142.9) = 100; 0 .. 7
    (0.0, 640.0, 8, [100.0 * k for k in range(8)], 0),
    # range = nice(0.0035) = 0.005; d = nice_round(0.00125) = 0.001; 1 .. 5; 3 decimals
    (0.0012, 0.0047, 5, [0.001, 0.002, 0.003, 0.004, 0.005], 3),
])
def test_nice_ticks_worked_cases(lo, hi, n, expected, nfrac) -> None:
    ticks, got_nfrac = nice_ticks(lo, hi, n)
    assert ticks == pytest.approx(expected, abs=1e-12)
    assert got_nfrac == nfrac


@pytest.mark.parametrize("seed", range(5))
def test_nice_ticks_cover_the_range_with_a_nice_step(seed: int) -> None:
    rng = np.random.default_rng(seed)
    for _ in range(200):
        lo = float(rng.normal(0, 10.0 ** rng.integers(-3, 4)))
        hi = lo + float(rng.uniform(1e-3, 1e3))
        ticks, _ = nice_ticks(lo, hi, 6)
        assert ticks[0] <= lo and ticks[-1] >= hi  # loose labelling covers the data
        steps = np.diff(ticks)
        assert np.allclose(steps, steps[0], rtol=1e-9)
        mant = steps[0] / 10.0 ** np.floor(np.log10(steps[0]) + 1e-12)
        assert min(abs(mant - m) for m in (1.0, 2.0, 5.0, 10.0)) < 1e-9  # 1, 2, 5 x 10^n
        assert 3 <= len(ticks) <= 12


def test_nice_ticks_widen_an_empty_range_and_refuse_nan() -> None:
    ticks, _ = nice_ticks(2.0, 2.0)
    assert ticks[0] < 2.0 < ticks[-1]
    with pytest.raises(ValueError, match="finite"):
        nice_ticks(0.0, float("nan"))


def test_tick_labels_use_a_true_minus_and_no_negative_zero() -> None:
    assert tick_label(-0.0, 1) == "0.0"
    assert tick_label(-1e-17, 2) == "0.00"
    assert tick_label(-2.5, 1) == "\u22122.5"  # U+2212 MINUS SIGN, as typeset in print


def test_data_to_pixel_transform_puts_known_points_where_expected() -> None:
    fig = Figure(600, 400)
    up = fig.axes((100, 50, 400, 300), (0.0, 10.0), (-1.0, 1.0))
    # x: 100 + (2.5 - 0) / 10 * 400 = 200; y up: 50 + (1 - (0 + 1) / 2) * 300 = 200
    assert (up.x(2.5), up.y(0.0)) == pytest.approx((200.0, 200.0))
    assert (up.x(10.0), up.y(1.0), up.y(-1.0)) == pytest.approx((500.0, 50.0, 350.0))
    down = fig.axes((100, 50, 400, 300), (0.0, 10.0), (-1.0, 1.0), y_down=True)
    assert down.y(-1.0) == pytest.approx(50.0) and down.y(1.0) == pytest.approx(350.0)
    # equal aspect: 640 x 512 data units in a 600 x 600 box -> 600/640 px per unit on both axes
    img = fig.axes((0, 0, 600, 600), (0.0, 640.0), (0.0, 512.0), y_down=True, equal_aspect=True)
    assert img.box[2:] == pytest.approx((600.0, 480.0))
    assert img.x(320.0) - img.x(0.0) == pytest.approx(img.y(320.0) - img.y(0.0))
    up.markers([2.5], [0.0], cls="probe")
    root = ET.fromstring(fig.to_svg().encode("utf-8"))
    (probe,) = [g for g in root.iter(f"{SVG}g") if g.get("class") == "probe"]
    (dot,) = list(probe)
    assert (float(dot.get("cx")), float(dot.get("cy"))) == pytest.approx((200.0, 200.0))


def test_text_is_escaped_and_survives_a_round_trip(tmp_path) -> None:
    nasty = 'UUT <A&B> "quoted" \'single\' ]]> \x07bell'
    fig = Figure(300, 100, description=nasty)
    fig.text(10, 20, nasty, cls="probe")
    ax = fig.axes((50, 30, 200, 50), (0.0, 1.0), (0.0, 1.0))
    ax.ticks([0.0, 1.0], [0.0, 1.0], xnfrac=0, ynfrac=0, xlabel="x <mm>", ylabel="y & z")
    path = fig.save(tmp_path / "t.svg")
    root = ET.parse(path).getroot()  # would raise on an unescaped & or < or a control character
    texts = ["".join(t.itertext()) for t in root.iter(f"{SVG}text")]
    assert nasty.replace("\x07", "") in texts  # the forbidden control character is dropped
    assert "x <mm>" in texts and "y & z" in texts
    assert escape("<&>") == "&lt;&amp;&gt;"


def test_viridis_matches_the_published_table() -> None:
    # Reference: matplotlib's 256-entry viridis table (van der Walt and Smith, 2015).
    from matplotlib import colormaps

    table = colormaps["viridis"].colors
    worst = 0
    for i, rgb in enumerate(table):
        got = viridis(i / 255)
        mine = [int(got[k:k + 2], 16) for k in (1, 3, 5)]
        worst = max(worst, max(abs(m - round(255 * c)) for m, c in zip(mine, rgb)))
    assert worst <= 6  # 17 stops, linear between them: within 6/255 everywhere
    assert viridis(0.0) == "#440154" and viridis(1.0) == "#fde725"
    assert viridis(-1.0) == viridis(0.0) and viridis(float("nan")) == viridis(0.0)


def test_save_is_atomic_and_follows_the_umask(tmp_path) -> None:
    fig = Figure(100, 100)
    fig.text(5, 20, "hello")
    old = os.umask(0o027)
    try:
        path = fig.save(tmp_path / "sub" / "a.svg")
    finally:
        os.umask(old)
    assert stat.S_IMODE(path.stat().st_mode) == 0o640  # as any new file under umask 027
    assert [p.name for p in path.parent.iterdir()] == ["a.svg"]  # no temporary file left
    assert path.read_text(encoding="utf-8").startswith('<?xml version="1.0" encoding="UTF-8"?>')


def test_vectorised_viridis_is_the_scalar_one_and_the_published_table() -> None:
    # Same interpolation as viridis(); reference: matplotlib's 256-entry table (van der Walt and
    # Smith, 2015), within the 6/255 the 17 stops allow.
    from matplotlib import colormaps

    from analysis.svg_plot import viridis_rgb

    t = np.linspace(0.0, 1.0, 256)
    got = viridis_rgb(t).astype(int)
    scalar = [[int(viridis(v)[k:k + 2], 16) for k in (1, 3, 5)] for v in t]
    assert np.abs(got - np.array(scalar)).max() <= 1  # rounding of the same interpolation
    table = np.round(255 * np.asarray(colormaps["viridis"].colors)).astype(int)
    assert np.abs(got - table).max() <= 6
    assert viridis_rgb(np.array([np.nan, -1.0, 2.0])).tolist() == [[68, 1, 84], [68, 1, 84],
                                                                    [253, 231, 37]]
