"""The analyses nightbench ships, in one list: add a new analysis's module here.

Each module under station/analyses/ declares one :class:`~station.analyses.registry.Analysis`
(name, options, needs, spec keys, result files, run function); the computation itself lives in
`analysis`.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from station.analyses.registry import Registry

__all__ = ["builtin_registry", "BUILTIN_NAMES"]

BUILTIN_NAMES = ("badpixels", "boresight", "distortion", "fov", "mtf", "netd", "noise3d", "sitf",
                 "uniformity")
"""Their names, known without importing them: the command line lists them at once (the modules
import numpy, scipy and the image code, which `nightbench --help` never needs)."""


def builtin_registry() -> Registry:
    """The built-in analyses by name (a new Registry each call: no shared state)."""
    from station.analyses import (badpixels, boresight, distortion, fov, mtf, netd, noise3d, sitf,
                                  uniformity)
    from station.analyses.registry import Registry

    return Registry([distortion.ANALYSIS, sitf.ANALYSIS, netd.ANALYSIS, uniformity.ANALYSIS,
                     boresight.ANALYSIS, fov.ANALYSIS, mtf.ANALYSIS,
                     noise3d.ANALYSIS, badpixels.ANALYSIS])
