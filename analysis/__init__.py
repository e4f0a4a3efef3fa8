"""Pure computation on arrays: geometry, centroids, distortion, radiometry, MTF, plots, report.

Imports no other nightbench package, so a notebook user can call it on any TIFF.
"""
