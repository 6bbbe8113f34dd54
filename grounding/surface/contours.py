"""Contour lines of a surface map."""

from __future__ import annotations

import numpy as np


def contour_lines(x: np.ndarray, y: np.ndarray, values: np.ndarray, levels) -> list[list[np.ndarray]]:
    """Contour polylines of a map at the given levels: per level, a list of (n, 2) arrays of x, y in m."""
    import contourpy

    gen = contourpy.contour_generator(x, y, values, line_type=contourpy.LineType.Separate)
    return [[np.asarray(line, float) for line in gen.lines(level)] for level in levels]
