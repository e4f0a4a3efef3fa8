"""Small SVG figures written by our own code: axes, nice ticks, lines, markers, arrows, text,
legend and colour bar, saved as one self-contained SVG file.

Why: importing a general plotting library costs about a second on a station PC, more than a
whole one-frame analysis; an SVG is a few hundred lines of text, stays vector (sharp in a PDF
report) and keeps its words as text. Only the standard library and numpy are used.

Coordinates: SVG user units are pixels, origin at the top left, y downward. Each Axes maps data
to pixels with one linear transform per axis; ``y_down=True`` for images (row downward).
"""

from __future__ import annotations

import base64
import math
import os
import struct
import tempfile
import zlib
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

__all__ = ["Axes", "Figure", "LegendEntry", "colour_of", "escape", "nice_number", "nice_ticks",
           "png_bytes", "tick_label", "viridis", "viridis_rgb"]

FONT = "sans-serif"
# Viridis (van der Walt and Smith, 2015, the perceptually uniform map published with matplotlib's
# colormap table), 17 equally spaced stops; linear interpolation between them stays within
# 6/255 of the full 256-entry table (checked in tests against that table).
VIRIDIS_STOPS = ("#440154", "#48186a", "#472d7b", "#424086", "#3b528b", "#33638d", "#2c728e",
                 "#26828e", "#21918c", "#1fa088", "#28ae80", "#3fbc73", "#5ec962", "#84d44b",
                 "#addc30", "#d8e219", "#fde725")
DASHES = {"solid": None, "dashed": "6 4", "dashdot": "8 3 2 3", "dotted": "2 3"}
_INVALID_XML = {c: None for c in range(32) if c not in (9, 10, 13)}


def escape(text: object) -> str:
    """Text safe inside an SVG element or attribute: & < > " ' escaped, and the control
    characters XML 1.0 forbids dropped (a serial number with a stray byte must not break the file).

    >>> escape('a < b & "c"')
    'a &lt; b &amp; &quot;c&quot;'
    """
    s = str(text).translate(_INVALID_XML)
    return (s.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
            .replace('"', "&quot;").replace("'", "&#39;"))


def nice_number(x: float, round_: bool) -> float:
    """A 1, 2, 5 x 10^n number near x (Heckbert, "Nice numbers for graph labels", Graphics
    Gems, 1990): rounded to the nearest when ``round_``, else the smallest not below x.

    >>> nice_number(0.87, False), nice_number(0.25, True)
    (1.0, 0.2)
    """
    if not math.isfinite(x) or x <= 0:
        raise ValueError(f"nice_number needs a positive finite number, got {x!r}")
    exp = math.floor(math.log10(x))
    f = x / 10.0 ** exp
    if round_:
        nf = 1.0 if f < 1.5 else 2.0 if f < 3.0 else 5.0 if f < 7.0 else 10.0
    else:
        nf = 1.0 if f <= 1.0 else 2.0 if f <= 2.0 else 5.0 if f <= 5.0 else 10.0
    return nf * 10.0 ** exp


def nice_ticks(lo: float, hi: float, n: int = 5) -> tuple[list[float], int]:
    """Heckbert's loose labelling (Graphics Gems, 1990): about ``n`` ticks at a nice spacing d,
    from floor(lo/d)*d to ceil(hi/d)*d, so the ticks cover [lo, hi]. Returns the ticks and the
    number of decimals that shows d exactly. An empty range is widened around its value.

    >>> nice_ticks(0.0, 0.87, 5)
    ([0.0, 0.2, 0.4, 0.6, 0.8, 1.0], 1)
    """
    if not (math.isfinite(lo) and math.isfinite(hi)):
        raise ValueError(f"tick range must be finite, got {lo!r} .. {hi!r}")
    lo, hi = min(lo, hi), max(lo, hi)
    if hi - lo <= 1e-12 * max(abs(lo), abs(hi), 1e-300):
        pad = abs(lo) * 0.1 if lo else 1.0
        lo, hi = lo - pad, hi + pad
    span = nice_number(hi - lo, False)
    d = nice_number(span / max(n - 1, 1), True)
    first, last = math.floor(lo / d), math.ceil(hi / d)
    nfrac = max(-math.floor(math.log10(d)), 0)
    ticks = [round(k * d, nfrac + 1) for k in range(first, last + 1)]
    return ticks, nfrac


def tick_label(value: float, nfrac: int) -> str:
    """A tick value with nfrac decimals, a true minus sign, and no "-0".

    >>> tick_label(-0.0, 1), tick_label(-2.5, 1) == "\u22122.5"
    ('0.0', True)
    """
    s = f"{value:.{nfrac}f}"
    if float(s) == 0.0:
        s = s.lstrip("-")
    return s.replace("-", "\u2212")


def _rgb(hex_colour: str) -> tuple[int, int, int]:
    return int(hex_colour[1:3], 16), int(hex_colour[3:5], 16), int(hex_colour[5:7], 16)


def viridis(t: float) -> str:
    """The colour at t in [0, 1] (clipped; NaN reads as 0), linear between the published stops.

    >>> viridis(0.0), viridis(0.5), viridis(1.0)
    ('#440154', '#21918c', '#fde725')
    """
    t = 0.0 if not math.isfinite(t) else min(max(t, 0.0), 1.0)
    pos = t * (len(VIRIDIS_STOPS) - 1)
    i = min(int(pos), len(VIRIDIS_STOPS) - 2)
    f = pos - i
    a, b = _rgb(VIRIDIS_STOPS[i]), _rgb(VIRIDIS_STOPS[i + 1])
    return "#" + "".join(f"{round(x + (y - x) * f):02x}" for x, y in zip(a, b))


def viridis_rgb(t: np.ndarray) -> np.ndarray:
    """Vectorised viridis: uint8 RGB of shape t.shape + (3,), the same interpolation between the
    published stops as ``viridis`` (t clipped to [0, 1]; NaN reads as 0, mask it yourself).

    >>> viridis_rgb(np.array([0.0, 1.0])).tolist()
    [[68, 1, 84], [253, 231, 37]]
    """
    stops = np.array([_rgb(c) for c in VIRIDIS_STOPS], float)
    t = np.clip(np.nan_to_num(np.asarray(t, float), nan=0.0), 0.0, 1.0)
    pos = t * (len(stops) - 1)
    i = np.minimum(pos.astype(int), len(stops) - 2)
    f = (pos - i)[..., None]
    return np.rint(stops[i] + (stops[i + 1] - stops[i]) * f).astype(np.uint8)


def png_bytes(rgb: np.ndarray) -> bytes:
    """A truecolour 8-bit PNG of an (rows, cols, 3) uint8 array, written by hand from the PNG
    specification (W3C/ISO 15948): signature, IHDR, one zlib IDAT of filter-0 scanlines, IEND,
    each chunk with its CRC-32. Standard library only, so drawing a map loads no imaging library.
    zlib level 1: on a noisy 640 x 512 map it is 2.5x faster than level 6 and no larger.
    """
    a = np.ascontiguousarray(rgb, dtype=np.uint8)
    if a.ndim != 3 or a.shape[2] != 3 or a.shape[0] == 0 or a.shape[1] == 0:
        raise ValueError(f"png_bytes needs a non-empty (rows, cols, 3) array, got {a.shape}")
    rows, cols = a.shape[:2]
    raw = np.zeros((rows, cols * 3 + 1), np.uint8)  # a leading 0 per row: filter type None
    raw[:, 1:] = a.reshape(rows, cols * 3)

    def chunk(kind: bytes, data: bytes) -> bytes:
        return (struct.pack(">I", len(data)) + kind + data
                + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF))

    ihdr = struct.pack(">IIBBBBB", cols, rows, 8, 2, 0, 0, 0)  # 8 bit, RGB, deflate, no interlace
    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", ihdr)
            + chunk(b"IDAT", zlib.compress(raw.tobytes(), 1)) + chunk(b"IEND", b""))


def colour_of(value: float, vmin: float, vmax: float) -> str:
    """Viridis colour of value on the scale vmin..vmax."""
    return viridis((value - vmin) / (vmax - vmin) if vmax > vmin else 0.0)


def _n(v: float) -> str:
    """A coordinate with two decimals, trailing zeros removed (small files, stable text)."""
    s = f"{v:.2f}".rstrip("0").rstrip(".")
    return "0" if s in ("-0", "") else s


def _text_width(text: str, size: float) -> float:
    """Rough width of sans-serif text (0.58 em per character): enough to size boxes."""
    return 0.58 * size * len(text)


@dataclass(frozen=True)
class LegendEntry:
    """One legend row: kind is 'line', 'marker', 'patch' or 'arrow' (arrow_px long)."""

    label: str
    kind: str
    colour: str
    dash: str = "solid"
    shape: str = "dot"
    width: float = 1.5
    opacity: float = 1.0
    arrow_px: float = 24.0


def _marker(shape: str, x: float, y: float, size: float, colour: str, width: float) -> str:
    r = size / 2
    if shape == "dot":
        return f'<circle cx="{_n(x)}" cy="{_n(y)}" r="{_n(r)}" fill="{colour}"/>'
    if shape == "ring":
        return (f'<circle cx="{_n(x)}" cy="{_n(y)}" r="{_n(r)}" fill="none" stroke="{colour}" '
                f'stroke-width="{_n(width)}"/>')
    if shape in ("square", "diamond", "triangle", "triangle_down"):
        if shape == "square":
            pts = [(x - r, y - r), (x + r, y - r), (x + r, y + r), (x - r, y + r)]
        elif shape == "diamond":
            pts = [(x, y - r), (x + r, y), (x, y + r), (x - r, y)]
        elif shape == "triangle":
            pts = [(x, y - r), (x + r, y + r * 0.8), (x - r, y + r * 0.8)]
        else:
            pts = [(x, y + r), (x + r, y - r * 0.8), (x - r, y - r * 0.8)]
        d = "M" + "L".join(f"{_n(a)} {_n(b)}" for a, b in pts) + "Z"
        return f'<path d="{d}" fill="{colour}" stroke="#000000" stroke-width="0.5"/>'
    if shape == "plus":
        d = f"M{_n(x - r)} {_n(y)}H{_n(x + r)}M{_n(x)} {_n(y - r)}V{_n(y + r)}"
    elif shape == "cross":
        d = (f"M{_n(x - r)} {_n(y - r)}L{_n(x + r)} {_n(y + r)}"
             f"M{_n(x - r)} {_n(y + r)}L{_n(x + r)} {_n(y - r)}")
    else:
        raise ValueError(f"unknown marker shape {shape!r}; use dot, ring, plus, cross, square, "
                         "diamond, triangle or triangle_down")
    return f'<path d="{d}" fill="none" stroke="{colour}" stroke-width="{_n(width)}"/>'


def _arrow(x0: float, y0: float, x1: float, y1: float, colour: str, width: float = 1.3) -> str:
    """One arrow as one path: the shaft, and a filled head at most 7 px long (0.4 of the arrow)."""
    length = math.hypot(x1 - x0, y1 - y0)
    if length < 1e-9:
        return (f'<path d="M{_n(x0)} {_n(y0)}h0" stroke="{colour}" stroke-width="{_n(width)}" '
                f'stroke-linecap="round"/>')
    ux, uy = (x1 - x0) / length, (y1 - y0) / length
    h = min(7.0, 0.4 * length)
    w = 0.45 * h
    bx, by = x1 - h * ux, y1 - h * uy
    d = (f"M{_n(x0)} {_n(y0)}L{_n(bx)} {_n(by)}M{_n(x1)} {_n(y1)}L{_n(bx - w * uy)} {_n(by + w * ux)}"
         f"L{_n(bx + w * uy)} {_n(by - w * ux)}Z")
    return f'<path d="{d}" fill="{colour}" stroke="{colour}" stroke-width="{_n(width)}"/>'


def _polyline_runs(px: np.ndarray, py: np.ndarray) -> list[str]:
    """Path data for each run of finite points (a NaN breaks the line, as it should)."""
    ok = np.isfinite(px) & np.isfinite(py)
    runs, cur = [], []
    for x, y, good in zip(px.tolist(), py.tolist(), ok.tolist()):
        if good:
            cur.append(f"{_n(x)} {_n(y)}")
        elif cur:
            runs.append(cur)
            cur = []
    if cur:
        runs.append(cur)
    return ["M" + "L".join(r) for r in runs if len(r) > 1]


class Axes:
    """A data area with its transform: x pixel = left + (x - x0) * sx, y likewise.

    Layers: grid under the data, the data clipped to the frame, frame and ticks on top.
    With ``equal_aspect`` one data unit is the same number of pixels on both axes (images);
    the box then shrinks to fit and ``box`` gives the pixels actually used.
    """

    def __init__(self, clip_id: str, box: tuple[float, float, float, float],
                 xlim: tuple[float, float], ylim: tuple[float, float], *,
                 y_down: bool = False, equal_aspect: bool = False) -> None:
        left, top, w, h = box
        (x0, x1), (y0, y1) = xlim, ylim
        if not (x1 > x0 and y1 > y0):
            raise ValueError(f"axes limits must increase: x {xlim}, y {ylim}")
        if equal_aspect:
            s = min(w / (x1 - x0), h / (y1 - y0))
            w, h = s * (x1 - x0), s * (y1 - y0)
        self.box = (left, top, w, h)
        self.xlim, self.ylim, self.y_down = (x0, x1), (y0, y1), y_down
        self._clip_id = clip_id
        self._grid: list[str] = []
        self._data: list[str] = []
        self._over: list[str] = []
        self.legend_entries: list[LegendEntry] = []

    def x(self, v: np.ndarray | float) -> np.ndarray | float:
        """Pixel column of data x."""
        left, _, w, _ = self.box
        return left + (v - self.xlim[0]) * (w / (self.xlim[1] - self.xlim[0]))

    def y(self, v: np.ndarray | float) -> np.ndarray | float:
        """Pixel row of data y (upward plots: larger y higher on the page)."""
        _, top, _, h = self.box
        frac = (v - self.ylim[0]) / (self.ylim[1] - self.ylim[0])
        return top + (frac if self.y_down else 1.0 - frac) * h

    def _legend(self, label: str | None, entry: LegendEntry) -> None:
        if label:
            self.legend_entries.append(entry)

    def line(self, xs: Sequence[float], ys: Sequence[float], *, colour: str = "#000000",
             width: float = 1.5, dash: str = "solid", label: str | None = None,
             cls: str | None = None) -> None:
        """A polyline through the finite points; NaN breaks it."""
        px = np.asarray(self.x(np.asarray(xs, float)), float)
        py = np.asarray(self.y(np.asarray(ys, float)), float)
        dash_attr = f' stroke-dasharray="{DASHES[dash]}"' if DASHES[dash] else ""
        cls_attr = f' class="{escape(cls)}"' if cls else ""
        for d in _polyline_runs(px, py):
            self._data.append(f'<path{cls_attr} d="{d}" fill="none" stroke="{colour}" '
                              f'stroke-width="{_n(width)}"{dash_attr} stroke-linejoin="round"/>')
        self._legend(label, LegendEntry(label or "", "line", colour, dash=dash, width=width))

    def hline(self, y: float, **kw: object) -> None:
        """A horizontal line across the whole axes at data y."""
        self.line(list(self.xlim), [y, y], **kw)  # type: ignore[arg-type]

    def band(self, xs: Sequence[float], lo: Sequence[float], hi: Sequence[float], *,
             colour: str, opacity: float = 0.25, label: str | None = None) -> None:
        """The area between lo and hi (e.g. a 1-sigma band), finite samples only."""
        xs_, lo_, hi_ = (np.asarray(a, float) for a in (xs, lo, hi))
        ok = np.isfinite(xs_) & np.isfinite(lo_) & np.isfinite(hi_)
        if ok.sum() >= 2:
            px = np.asarray(self.x(xs_[ok]), float)
            pts = np.concatenate([np.column_stack([px, self.y(hi_[ok])]),
                                  np.column_stack([px[::-1], self.y(lo_[ok][::-1])])])
            d = "M" + "L".join(f"{_n(a)} {_n(b)}" for a, b in pts.tolist()) + "Z"
            self._data.append(f'<path d="{d}" fill="{colour}" fill-opacity="{_n(opacity)}" '
                              f'stroke="none"/>')
        self._legend(label, LegendEntry(label or "", "patch", colour, opacity=opacity))

    def markers(self, xs: Sequence[float], ys: Sequence[float], *, shape: str = "dot",
                size: float = 5.0, colour: str = "#000000", width: float = 1.2,
                label: str | None = None, cls: str = "markers") -> None:
        """One marker per finite point, grouped under ``cls`` (a class a reader can count)."""
        px = np.asarray(self.x(np.asarray(xs, float)), float)
        py = np.asarray(self.y(np.asarray(ys, float)), float)
        body = [_marker(shape, a, b, size, colour, width)
                for a, b in zip(px.tolist(), py.tolist()) if math.isfinite(a) and math.isfinite(b)]
        self._data.append(f'<g class="{escape(cls)}">' + "".join(body) + "</g>")
        self._legend(label, LegendEntry(label or "", "marker", colour, shape=shape, width=width))

    def arrows(self, xs: np.ndarray, ys: np.ndarray, dxs: np.ndarray, dys: np.ndarray,
               colours: Sequence[str], *, cls: str = "arrows", width: float = 1.3) -> None:
        """One arrow per row from (x, y) to (x + dx, y + dy), all in data units."""
        x0 = np.asarray(self.x(np.asarray(xs, float)), float)
        y0 = np.asarray(self.y(np.asarray(ys, float)), float)
        x1 = np.asarray(self.x(np.asarray(xs, float) + np.asarray(dxs, float)), float)
        y1 = np.asarray(self.y(np.asarray(ys, float) + np.asarray(dys, float)), float)
        body = [_arrow(a, b, c, d, col, width)
                for a, b, c, d, col in zip(x0.tolist(), y0.tolist(), x1.tolist(), y1.tolist(), colours)
                if all(map(math.isfinite, (a, b, c, d)))]
        self._data.append(f'<g class="{escape(cls)}">' + "".join(body) + "</g>")

    def rect(self, x0: float, y0: float, x1: float, y1: float, *, colour: str = "#666666",
             width: float = 1.0) -> None:
        """An unfilled rectangle between two data corners (e.g. the detector outline)."""
        xa, xb = sorted((float(self.x(x0)), float(self.x(x1))))
        ya, yb = sorted((float(self.y(y0)), float(self.y(y1))))
        self._data.append(f'<rect x="{_n(xa)}" y="{_n(ya)}" width="{_n(xb - xa)}" '
                          f'height="{_n(yb - ya)}" fill="none" stroke="{colour}" '
                          f'stroke-width="{_n(width)}"/>')

    def vline(self, x: float, *, colour: str = "#000000", width: float = 1.0,
              dash: str = "solid", label: str | None = None, cls: str | None = None) -> None:
        """A vertical line across the whole axes at data x."""
        self.line([x, x], list(self.ylim), colour=colour, width=width, dash=dash, label=label,
                  cls=cls)

    def image(self, rgb: np.ndarray, *, cls: str = "image") -> None:
        """An (rows, cols, 3) uint8 picture as an embedded PNG, pixel (col c, row r) centred on
        data (c, r): extent -0.5 .. cols - 0.5. ``image-rendering: pixelated`` keeps every pixel
        a sharp square when scaled (a single bad pixel is never smoothed away)."""
        rows, cols = rgb.shape[:2]
        x0, x1 = float(self.x(-0.5)), float(self.x(cols - 0.5))
        ya, yb = sorted((float(self.y(-0.5)), float(self.y(rows - 0.5))))
        data = base64.b64encode(png_bytes(rgb)).decode("ascii")
        self._data.append(
            f'<image class="{escape(cls)}" x="{_n(x0)}" y="{_n(ya)}" width="{_n(x1 - x0)}" '
            f'height="{_n(yb - ya)}" preserveAspectRatio="none" '
            f'image-rendering="optimizeSpeed" style="image-rendering: pixelated" '
            f'href="data:image/png;base64,{data}"/>')

    def bars(self, lefts: Sequence[float], rights: Sequence[float], heights: Sequence[float], *,
             colour: str = "#1f5fa8", base: float = 0.0, cls: str = "bars",
             label: str | None = None) -> None:
        """One filled rectangle per bar from base up to its height (histograms, bar charts)."""
        body = []
        for a, b, hgt in zip(lefts, rights, heights):
            if not all(map(math.isfinite, (a, b, hgt))):
                continue
            xa, xb = sorted((float(self.x(a)), float(self.x(b))))
            ya, yb = sorted((float(self.y(base)), float(self.y(hgt))))
            body.append(f'<rect x="{_n(xa)}" y="{_n(ya)}" width="{_n(xb - xa)}" '
                        f'height="{_n(yb - ya)}"/>')
        self._data.append(f'<g class="{escape(cls)}" fill="{colour}">' + "".join(body) + "</g>")
        self._legend(label, LegendEntry(label or "", "patch", colour))

    def errorbars(self, xs: Sequence[float], ys: Sequence[float], *,
                  xerr: Sequence[float] | None = None, yerr: Sequence[float] | None = None,
                  colour: str = "#000000", width: float = 1.0, cap: float = 3.0,
                  cls: str = "errorbars") -> None:
        """A +/- err bar (with caps) about each finite point, one path per point."""
        n = len(xs)
        xe = [0.0] * n if xerr is None else list(xerr)
        ye = [0.0] * n if yerr is None else list(yerr)
        body = []
        for x, y, ex, ey in zip(xs, ys, xe, ye):
            if not all(map(math.isfinite, (x, y, ex, ey))):
                continue
            d = ""
            if ey > 0:
                px, ya, yb = float(self.x(x)), float(self.y(y - ey)), float(self.y(y + ey))
                d += (f"M{_n(px)} {_n(ya)}V{_n(yb)}M{_n(px - cap)} {_n(ya)}h{_n(2 * cap)}"
                      f"M{_n(px - cap)} {_n(yb)}h{_n(2 * cap)}")
            if ex > 0:
                py, xa, xb = float(self.y(y)), float(self.x(x - ex)), float(self.x(x + ex))
                d += (f"M{_n(xa)} {_n(py)}H{_n(xb)}M{_n(xa)} {_n(py - cap)}v{_n(2 * cap)}"
                      f"M{_n(xb)} {_n(py - cap)}v{_n(2 * cap)}")
            if d:
                body.append(f'<path d="{d}"/>')
        self._data.append(f'<g class="{escape(cls)}" fill="none" stroke="{colour}" '
                          f'stroke-width="{_n(width)}">' + "".join(body) + "</g>")

    def circle(self, cx: float, cy: float, r: float, *, colour: str = "#000000",
               width: float = 1.2, dash: str = "solid", label: str | None = None,
               cls: str = "circle") -> None:
        """A circle of data radius r (an ellipse in pixels when the axes are not equal-aspect)."""
        rx = abs(float(self.x(cx + r)) - float(self.x(cx)))
        ry = abs(float(self.y(cy + r)) - float(self.y(cy)))
        dash_attr = f' stroke-dasharray="{DASHES[dash]}"' if DASHES[dash] else ""
        self._data.append(f'<ellipse class="{escape(cls)}" cx="{_n(float(self.x(cx)))}" '
                          f'cy="{_n(float(self.y(cy)))}" rx="{_n(rx)}" ry="{_n(ry)}" fill="none" '
                          f'stroke="{colour}" stroke-width="{_n(width)}"{dash_attr}/>')
        self._legend(label, LegendEntry(label or "", "line", colour, dash=dash, width=width))

    def top_ticks(self, xs: Sequence[float], texts: Sequence[str], label: str, *,
                  size: float = 11) -> None:
        """Ticks and labels along the top edge at data x (a second scale, e.g. cycles/mm)."""
        left, top, w, _ = self.box
        for v, t in zip(xs, texts):
            if self.xlim[0] - 1e-9 <= v <= self.xlim[1] + 1e-9:
                px = float(self.x(v))
                self._over.append(f'<path d="M{_n(px)} {_n(top)}v-5" stroke="#000000"/>')
                self._over.append(_text(px, top - 9, t, size=size, anchor="middle", cls="x2tick"))
        self._over.append(_text(left + w / 2, top - 28, label, size=size + 1, anchor="middle",
                                cls="x2label"))

    def text(self, x: float, y: float, s: str, **kw: object) -> None:
        """Text at a data position (see Figure.text for the keywords)."""
        self._over.append(_text(float(self.x(x)), float(self.y(y)), s, **kw))  # type: ignore[arg-type]

    def ticks(self, xticks: Sequence[float], yticks: Sequence[float], *, xnfrac: int,
              ynfrac: int, xlabel: str, ylabel: str, grid: bool = True, size: float = 11,
              ytexts: Sequence[str] | None = None, xtexts: Sequence[str] | None = None
              ) -> None:
        """Tick marks and labels at the given values (those outside the limits are skipped),
        optional light grid lines, and the axis labels (with their units). ``ytexts`` replaces
        the y tick labels (e.g. decades of a log axis drawn as log10 values), ``xtexts`` the x
        ones (e.g. category names)."""
        left, top, w, h = self.box
        bottom = top + h
        ylabs = list(ytexts) if ytexts is not None else [tick_label(v, ynfrac) for v in yticks]
        xlabs = list(xtexts) if xtexts is not None else [tick_label(v, xnfrac) for v in xticks]
        for v, xlab in zip(xticks, xlabs):
            if not self.xlim[0] - 1e-9 <= v <= self.xlim[1] + 1e-9:
                continue
            px = float(self.x(v))
            if grid:
                self._grid.append(f'<path d="M{_n(px)} {_n(top)}V{_n(bottom)}" stroke="#e3e3e3" '
                                  f'stroke-width="0.8"/>')
            self._over.append(f'<path d="M{_n(px)} {_n(bottom)}v5" stroke="#000000"/>')
            self._over.append(_text(px, bottom + 18, xlab, size=size,
                                    anchor="middle", cls="xtick"))
        for v, lab in zip(yticks, ylabs):
            if not self.ylim[0] - 1e-9 <= v <= self.ylim[1] + 1e-9:
                continue
            py = float(self.y(v))
            if grid:
                self._grid.append(f'<path d="M{_n(left)} {_n(py)}H{_n(left + w)}" '
                                  f'stroke="#e3e3e3" stroke-width="0.8"/>')
            self._over.append(f'<path d="M{_n(left)} {_n(py)}h-5" stroke="#000000"/>')
            self._over.append(_text(left - 8, py + size * 0.35, lab, size=size, anchor="end",
                                    cls="ytick"))
        ylab_w = max((_text_width(lab, size) for lab in ylabs), default=0)
        self._over.append(_text(left + w / 2, bottom + 40, xlabel, size=size + 1, anchor="middle",
                                cls="xlabel"))
        self._over.append(_text(left - ylab_w - 20, top + h / 2, ylabel, size=size + 1,
                                anchor="middle", rotate=-90, cls="ylabel"))

    def title(self, s: str, size: float = 13) -> None:
        left, top, w, _ = self.box
        self._over.append(_text(left + w / 2, top - 10, s, size=size, anchor="middle", cls="axes-title"))

    def render(self) -> str:
        left, top, w, h = self.box
        cid = escape(self._clip_id)
        return "".join([
            f'<clipPath id="{cid}"><rect x="{_n(left)}" y="{_n(top)}" width="{_n(w)}" '
            f'height="{_n(h)}"/></clipPath>',
            f'<rect x="{_n(left)}" y="{_n(top)}" width="{_n(w)}" height="{_n(h)}" fill="#ffffff"/>',
            *self._grid,
            f'<g clip-path="url(#{cid})">', *self._data, "</g>",
            f'<rect x="{_n(left)}" y="{_n(top)}" width="{_n(w)}" height="{_n(h)}" fill="none" '
            f'stroke="#000000" stroke-width="1"/>',
            *self._over,
        ])


def _text(x: float, y: float, s: str, *, size: float = 12, anchor: str = "start",
          colour: str = "#000000", weight: str = "normal", rotate: float | None = None,
          cls: str | None = None) -> str:
    rot = f' transform="rotate({_n(rotate)} {_n(x)} {_n(y)})"' if rotate else ""
    cls_attr = f' class="{escape(cls)}"' if cls else ""
    bold = ' font-weight="bold"' if weight != "normal" else ""
    return (f'<text{cls_attr} x="{_n(x)}" y="{_n(y)}" font-size="{_n(size)}" '
            f'text-anchor="{anchor}" fill="{colour}"{bold}{rot}>{escape(s)}</text>')


class Figure:
    """An SVG page of width x height pixels holding text, axes, legends and colour bars."""

    def __init__(self, width: float, height: float, *, description: str = "") -> None:
        self.width, self.height = width, height
        self._items: list[str | Axes] = []
        self._description = description

    def axes(self, box: tuple[float, float, float, float], xlim: tuple[float, float],
             ylim: tuple[float, float], **kw: bool) -> Axes:
        """New axes in box = (left, top, width, height) pixels."""
        ax = Axes(f"clip{sum(isinstance(i, Axes) for i in self._items)}", box, xlim, ylim, **kw)
        self._items.append(ax)
        return ax

    def text(self, x: float, y: float, s: str, *, size: float = 12, anchor: str = "start",
             colour: str = "#000000", weight: str = "normal", rotate: float | None = None,
             cls: str | None = None) -> None:
        """Text with its baseline at (x, y) pixels; anchor start, middle or end."""
        self._items.append(_text(x, y, s, size=size, anchor=anchor, colour=colour, weight=weight,
                                 rotate=rotate, cls=cls))

    def legend(self, x: float, y: float, entries: Sequence[LegendEntry], *, ncol: int = 1,
               size: float = 11, col_width: float | None = None) -> tuple[float, float]:
        """A framed legend with its top left at (x, y); entries fill rows of ncol columns.
        Returns its (width, height) in pixels."""
        if not entries:
            return 0.0, 0.0
        glyph = max([34.0] + [e.arrow_px + 6 for e in entries if e.kind == "arrow"])
        cw = col_width or max(glyph + 8 + _text_width(e.label, size) for e in entries) + 16
        row_h = size + 9
        nrow = math.ceil(len(entries) / ncol)
        width, height = cw * min(ncol, len(entries)) + 8, row_h * nrow + 8
        out = [f'<g class="legend"><rect x="{_n(x)}" y="{_n(y)}" width="{_n(width)}" '
               f'height="{_n(height)}" fill="#ffffff" fill-opacity="0.9" stroke="#999999"/>']
        for i, e in enumerate(entries):
            cx = x + 8 + (i % ncol) * cw
            cy = y + 4 + (i // ncol) * row_h + row_h / 2
            if e.kind == "line":
                dash = f' stroke-dasharray="{DASHES[e.dash]}"' if DASHES[e.dash] else ""
                out.append(f'<path d="M{_n(cx)} {_n(cy)}h28" stroke="{e.colour}" '
                           f'stroke-width="{_n(e.width)}"{dash}/>')
            elif e.kind == "patch":
                out.append(f'<rect x="{_n(cx)}" y="{_n(cy - 5)}" width="28" height="10" '
                           f'fill="{e.colour}" fill-opacity="{_n(e.opacity)}"/>')
            elif e.kind == "arrow":
                out.append(f'<g class="legend-arrow">{_arrow(cx, cy, cx + e.arrow_px, cy, e.colour)}</g>')
            else:
                out.append(_marker(e.shape, cx + 14, cy, 8.0, e.colour, e.width))
            out.append(_text(cx + glyph, cy + size * 0.35, e.label, size=size))
        self._items.append("".join(out) + "</g>")
        return width, height

    def colour_bar(self, box: tuple[float, float, float, float], vmin: float, vmax: float,
                   label: str, *, size: float = 11, steps: int = 100) -> None:
        """A vertical viridis bar (vmin at the bottom) with nice ticks inside vmin..vmax."""
        left, top, w, h = box
        out = ['<g class="colour-bar">']
        for k in range(steps):  # slightly overlapping bands: no hairline seams in any renderer
            y = top + h - (k + 1) * h / steps
            out.append(f'<rect x="{_n(left)}" y="{_n(y)}" width="{_n(w)}" '
                       f'height="{_n(h / steps + 0.6)}" fill="{viridis((k + 0.5) / steps)}"/>')
        out.append(f'<rect x="{_n(left)}" y="{_n(top)}" width="{_n(w)}" height="{_n(h)}" '
                   f'fill="none" stroke="#000000"/>')
        hi = vmax if vmax > vmin else vmin + 1.0
        ticks, nfrac = nice_ticks(vmin, hi, 6)
        for v in ticks:
            if vmin - 1e-12 <= v <= hi + 1e-12:
                py = top + h - (v - vmin) / (hi - vmin) * h
                out.append(f'<path d="M{_n(left + w)} {_n(py)}h5" stroke="#000000"/>')
                out.append(_text(left + w + 8, py + size * 0.35, tick_label(v, nfrac), size=size,
                                 cls="cbar-tick"))
        lab_x = left + w + 16 + max(_text_width(tick_label(v, nfrac), size) for v in ticks)
        out.append(_text(lab_x + size, top + h / 2, label, size=size + 1, anchor="middle",
                         rotate=-90, cls="cbar-label"))
        self._items.append("".join(out) + "</g>")

    def to_svg(self) -> str:
        """The whole document (UTF-8 XML, standalone SVG 1.1)."""
        head = (f'<?xml version="1.0" encoding="UTF-8"?>\n'
                f'<svg xmlns="http://www.w3.org/2000/svg" version="1.1" width="{_n(self.width)}" '
                f'height="{_n(self.height)}" viewBox="0 0 {_n(self.width)} {_n(self.height)}" '
                f'font-family="{FONT}" xml:space="preserve">\n')
        desc = f"<desc>{escape(self._description)}</desc>\n" if self._description else ""
        bg = f'<rect width="{_n(self.width)}" height="{_n(self.height)}" fill="#ffffff"/>\n'
        body = "\n".join(i.render() if isinstance(i, Axes) else i for i in self._items)
        return head + desc + bg + body + "\n</svg>\n"

    def save(self, path: str | os.PathLike[str]) -> Path:
        """Write the SVG atomically (temporary file in the same folder, then rename): a reader
        never sees half a plot."""
        path = Path(path)
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
        try:
            mask = os.umask(0o022)  # mkstemp gives 0600; follow the umask as any new file does
            os.umask(mask)
            os.fchmod(fd, 0o666 & ~mask)
            with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
                fh.write(self.to_svg())
                fh.flush()
                os.fsync(fh.fileno())
            os.replace(tmp, path)
        except BaseException:
            Path(tmp).unlink(missing_ok=True)
            raise
        return path
