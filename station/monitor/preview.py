"""The latest frame as a small PNG: contrast-stretched, with the detected spots marked.

Rendered by the monitor from the newest finished capture on disk (its files are written
atomically by the run), so the run spends no time on previews and a run without a monitor pays
nothing. The PNG is encoded here with zlib (PNG specification, ISO/IEC 15948:2004: signature,
IHDR, IDAT, IEND chunks with CRC-32): no imaging library is needed for an 8-bit RGB thumbnail.
"""

from __future__ import annotations

import struct
import zlib
from pathlib import Path

import numpy as np

__all__ = ["stretch", "thumbnail", "mark_spots", "encode_png", "preview_png"]

MAX_SIDE = 480
SPOT_TARGETS = ("pinhole", "grid")


def stretch(image: np.ndarray, low_pct: float = 1.0, high_pct: float = 99.5) -> np.ndarray:
    """Percentile contrast stretch to 0..255 (uint8); a flat frame comes out mid-grey.

    >>> stretch(np.array([[0.0, 50.0], [100.0, 100.0]]), 0, 100).tolist()
    [[0, 127], [255, 255]]
    """
    img = np.asarray(image, dtype=np.float64)
    finite = img[np.isfinite(img)]
    if finite.size == 0:
        return np.full(img.shape, 128, dtype=np.uint8)
    lo, hi = np.percentile(finite, [low_pct, high_pct])
    if hi <= lo:
        return np.full(img.shape, 128, dtype=np.uint8)
    out = (np.nan_to_num(img, nan=lo) - lo) * (255.0 / (hi - lo))
    return np.clip(out, 0, 255).astype(np.uint8)


def thumbnail(image: np.ndarray, max_side: int = MAX_SIDE) -> tuple[np.ndarray, int]:
    """Block-mean downsample by a whole factor so the longer side fits `max_side`."""
    rows, cols = image.shape[-2:]
    factor = max(1, int(np.ceil(max(rows, cols) / max_side)))
    r, c = rows // factor * factor, cols // factor * factor
    small = image[:r, :c].reshape(r // factor, factor, c // factor, factor).mean(axis=(1, 3))
    return small, factor


def mark_spots(rgb: np.ndarray, xy: np.ndarray, scale: int, size: int = 4) -> np.ndarray:
    """Draw a small red cross at each (x, y) full-frame position on the thumbnail."""
    out = rgb.copy()
    h, w = out.shape[:2]
    for x, y in np.asarray(xy, dtype=float).reshape(-1, 2):
        cx, cy = int(round(x / scale)), int(round(y / scale))
        for d in range(-size, size + 1):
            if 0 <= cy < h and 0 <= cx + d < w:
                out[cy, cx + d] = (255, 40, 40)
            if 0 <= cy + d < h and 0 <= cx < w:
                out[cy + d, cx] = (255, 40, 40)
    return out


def encode_png(rgb: np.ndarray) -> bytes:
    """An 8-bit RGB array (rows, cols, 3) as PNG bytes."""
    rgb = np.ascontiguousarray(rgb, dtype=np.uint8)
    h, w = rgb.shape[:2]
    raw = b"".join(b"\x00" + rgb[row].tobytes() for row in range(h))

    def chunk(kind: bytes, data: bytes) -> bytes:
        return (struct.pack(">I", len(data)) + kind + data
                + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF))

    header = struct.pack(">IIBBBBB", w, h, 8, 2, 0, 0, 0)
    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", header) + chunk(b"IDAT", zlib.compress(raw, 6))
            + chunk(b"IEND", b""))


def preview_png(image_path: Path, target: str | None) -> bytes:
    """The preview of one capture file (an average, or the last frame of a stack)."""
    import tifffile

    data = tifffile.imread(str(image_path))
    frame = data[-1] if data.ndim == 3 else data
    small, factor = thumbnail(np.asarray(frame, dtype=np.float64))
    grey = stretch(small)
    rgb = np.repeat(grey[:, :, None], 3, axis=2)
    if target and any(word in target for word in SPOT_TARGETS):
        from analysis.centroid import detect_spots

        try:
            spots = detect_spots(np.asarray(frame, dtype=np.float64))
            rgb = mark_spots(rgb, np.array([[s.x, s.y] for s in spots]).reshape(-1, 2), factor)
        except (ValueError, FloatingPointError):
            pass  # a preview without marks is still a preview
    return encode_png(rgb)
