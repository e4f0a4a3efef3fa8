"""The analyses nightbench ships, in one list: add a new analysis's module here.

Each module under station/analyses/ declares one :class:`~station.analyses.registry.Analysis`
(name, options, needs, spec keys, result files, run function); the computation itself lives in
`analysis`.
"""

from __future__ import annotations

from station.analyses import (badpixels, boresight, distortion, fov, mtf, netd, noise3d, sitf,
                              uniformity)
from station.analyses.registry import Registry

__all__ = ["builtin_registry"]


def builtin_registry() -> Registry:
    """The built-in analyses by name (a new Registry each call: no shared state)."""
    return Registry([distortion.ANALYSIS, sitf.ANALYSIS, netd.ANALYSIS, uniformity.ANALYSIS,
                     boresight.ANALYSIS, fov.ANALYSIS, mtf.ANALYSIS,
                     noise3d.ANALYSIS, badpixels.ANALYSIS])
