"""Worst points revisited: a worst touch, mesh or step voltage found by a full search, evaluated again for other
segment currents around the same place, without a new map.

Used where the currents change a little (a soil parameter nudged for a derivative): to first order the worst value
moves with the field at its own place (a maximum is stationary in position), so the value at the known worst
point and a small zoom around it (half a map spacing) give the derivative; the neighbourhood catches a peak that
drifts within it."""

from __future__ import annotations

import numpy as np
import shapely

from .results import Extreme
from .search import zoom_maximum
from .steps import REFINE_STEP_DIRECTIONS, steps_at
from .zoning import Zoning

#: Zoom around a known worst point: points per side and levels (half-width half a map spacing).
REVISIT_POINTS = 5
REVISIT_LEVELS = 2


def touch_again(touch_at, worst: Extreme, region: shapely.Geometry, zoning: Zoning, k: int,
                resolution: float) -> float:
    """Largest touch voltage (V) of ``touch_at`` (vectorised over (M, 2) points, m) near ``worst`` inside
    ``region`` and zone k, starting from the known worst point."""
    def accept(px, py):
        return shapely.intersects_xy(region, px, py) & (zoning.label(px, py) == k)

    value, _, _ = zoom_maximum(touch_at, worst.x, worst.y, 0.5 * resolution, accept, REVISIT_POINTS, REVISIT_LEVELS)
    return value


def step_again(potential, worst: Extreme, step_len: float, zoning: Zoning, k: int, resolution: float) -> float:
    """Largest step voltage (V) of ``potential`` near ``worst`` that belongs to zone k: a zoom on a few
    directions, then the point found and the known point in the full set of directions."""
    def coarse(p):
        return steps_at(potential, p, step_len, zoning, k, REFINE_STEP_DIRECTIONS)

    _, qx, qy = zoom_maximum(coarse, worst.x, worst.y, 0.5 * resolution, lambda x, y: np.ones(np.shape(x), bool),
                             REVISIT_POINTS, REVISIT_LEVELS)
    values = steps_at(potential, np.array([[worst.x, worst.y], [qx, qy]]), step_len, zoning, k)
    return float(np.max(values))
