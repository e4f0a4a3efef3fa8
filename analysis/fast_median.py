"""Median of a small 1-D array without np.median's general-purpose wrapping.

np.median costs tens of microseconds per call in argument handling alone, more than the
selection itself on the few hundred values of a frame's spots or matched points. The value is
np.median's, bit for bit: the middle value, or the mean of the two middle values
(selection by np.partition, Hoare's quickselect / introselect).
"""

from __future__ import annotations

import numpy as np

__all__ = ["median"]


def median(v: np.ndarray) -> float:
    """np.median of a non-empty 1-D array of finite numbers, as a float."""
    n = v.size
    k = n // 2
    if n % 2:
        return float(np.partition(v, k)[k])
    part = np.partition(v, (k - 1, k))
    return float((part[k - 1] + part[k]) / 2.0)
