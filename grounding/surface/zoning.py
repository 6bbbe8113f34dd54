"""Which surface zone a point stands in, and which of two zones is the more severe."""

from __future__ import annotations

import numpy as np
import shapely
from shapely.geometry import Polygon
from shapely.ops import unary_union


class Zoning:
    """Which zone each surface point stands in.

    Parameters
    ----------
    areas : sequence of shapely geometry or None
        Zone areas in the x–y plane (m); None for the zone of everything no other zone covers (at most one).
    severity : sequence of float
        Larger is more severe (a lower limit). A point on a shared edge belongs to the more severe zone;
        a step belongs to the zone of the foot with the more severe zone.
    """

    def __init__(self, areas=(None,), severity=(0.0,)):
        self.areas = list(areas)
        self.severity = np.asarray(severity, float)
        self.rest = next((k for k, a in enumerate(self.areas) if a is None), -1)
        # test the most severe zones first so that shared edges go to them
        self.order = [k for k in np.argsort(-self.severity, kind="stable") if self.areas[k] is not None]
        for k in self.order:
            shapely.prepare(self.areas[k])
        self.union = unary_union([self.areas[k] for k in self.order]) if self.order else Polygon()
        shapely.prepare(self.union)

    def __len__(self) -> int:
        return len(self.areas)

    def label(self, x, y) -> np.ndarray:
        """Zone index of points (x, y), m; −1 for points in no zone."""
        x, y = np.broadcast_arrays(np.asarray(x, float), np.asarray(y, float))
        out = np.full(x.shape, self.rest, dtype=int)
        if not self.order:
            return out
        done = np.zeros(x.shape, bool)
        for k in self.order:
            hit = ~done & shapely.intersects_xy(self.areas[k], x, y)
            out[hit] = k
            done |= hit
        if self.rest >= 0:
            # the outer edge of the listed zones belongs to the rest when the rest is more severe
            lenient = done & (self.severity[np.maximum(out, 0)] < self.severity[self.rest])
            if lenient.any():
                edge = lenient & ~shapely.contains_xy(self.union, x, y)
                out[edge] = self.rest
        return out

    def worse(self, a: np.ndarray, b: np.ndarray) -> np.ndarray:
        """Per element, the more severe of zones a and b."""
        sev = np.append(self.severity, -np.inf)           # −1 (no zone) is the least severe
        return np.where(sev[b] > sev[a], b, a)

    def part(self, geometry: shapely.Geometry, k: int) -> shapely.Geometry:
        """The part of ``geometry`` in zone k (approximately, for choosing candidate points)."""
        if self.areas[k] is not None:
            return geometry.intersection(self.areas[k])
        return geometry.difference(self.union) if self.order else geometry
