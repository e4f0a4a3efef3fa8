"""Per-pixel temporal mean and variance of a stack of frames (frames, rows, cols).

Why a module of its own: NETD, SiTF, uniformity and the bad-pixel map all start from these two
maps, and the obvious `stack.astype(float64).var(axis=0)` copies a 64-frame 640x512 stack into
168 MB and passes over it three times. Integer frames (every camera's raw counts) need neither:
the sums S1 = sum x and S2 = sum x^2 are exact in 64-bit integers, and so is
n S2 - S1^2 = n (n - 1) s^2, the textbook computational formula, which is numerically safe here
only because nothing is rounded before the one final division (exact integer arithmetic removes
the cancellation that makes the formula unsafe in floating point; see Chan, Golub & LeVeque,
"Algorithms for computing the sample variance", The American Statistician 37 (1983) 242-247).
Float frames (averaged or corrected data) take the two-pass float64 route.

    >>> import numpy as np
    >>> stack = np.array([[[1, 2]], [[3, 2]], [[5, 2]]], dtype=np.uint16)
    >>> mean, var = temporal_mean_var(stack)
    >>> mean.tolist(), var.tolist()
    ([[3.0, 2.0]], [[4.0, 0.0]])
"""

from __future__ import annotations

import numpy as np

__all__ = ["temporal_mean_var"]

_EXACT_BITS = 16
_EXACT_FRAMES = 2 ** 15
"""Integer frames of up to 16 bits are summed exactly: n S2 and S1^2 stay below
n^2 (2^16 - 1)^2 < 2^63 for n < 2^15 frames."""


def temporal_mean_var(stack: np.ndarray, ddof: int = 1) -> tuple[np.ndarray, np.ndarray]:
    """Mean and variance (with `ddof`) over axis 0, as float64 maps of shape (rows, cols)."""
    s = np.asarray(stack)
    if s.ndim != 3 or s.shape[0] <= ddof:
        raise ValueError(f"need a stack (frames, rows, cols) of more than {ddof} frames, "
                         f"got shape {s.shape}")
    n = s.shape[0]
    exact = (np.issubdtype(s.dtype, np.integer) and s.dtype.itemsize * 8 <= _EXACT_BITS
             and n < _EXACT_FRAMES)
    if not exact:
        a = s.astype(np.float64)
        return a.mean(axis=0), a.var(axis=0, ddof=ddof)
    s1 = np.zeros(s.shape[1:], dtype=np.int64)
    s2 = np.zeros(s.shape[1:], dtype=np.int64)
    frame = np.empty(s.shape[1:], dtype=np.int64)
    for f in s:  # one frame at a time: no stack-sized temporary
        np.copyto(frame, f, casting="safe")
        s1 += frame
        np.multiply(frame, frame, out=frame)
        s2 += frame
    mean = s1 / n
    np.multiply(s2, n, out=s2)
    np.multiply(s1, s1, out=s1)
    s2 -= s1  # n S2 - S1^2 = n sum (x - mean)^2, exactly
    var = s2 / (n * (n - ddof))
    return mean, var
