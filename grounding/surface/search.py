"""Search of the worst touch voltage in an area and zone: map points, the area's edge, then a zoom search on the exact potential."""

from __future__ import annotations

import math

import numpy as np
import shapely

from ..case.model import SurfaceMap
from ..geometry.plan import metal_footprint
from ..geometry.segments import Segments
from .results import TIE, Extreme, MetalTouch, SeparateMetal, beats, top_candidates
from .zoning import Zoning

#: Most points sampled along the edge of an area when searching its worst point.
MAX_EDGE_POINTS = 20_000
#: Zoom search for a local maximum: points per side of each patch, and zoom levels.
ZOOM_POINTS = 7
ZOOM_LEVELS = 4


def zoom_maximum(field, x0: float, y0: float, half_width: float, accept, points: int = ZOOM_POINTS,
            levels: int = ZOOM_LEVELS) -> tuple[float, float, float]:
    """Local maximum of ``field`` (vectorised over (M, 2) points) near (x0, y0) by a zoom search: a patch of
    ZOOM_POINTS² points over ±half_width, then patches a third the size around the best point,
    ZOOM_LEVELS times; only points where ``accept(x, y)`` (vectorised) count. Returns (value, x, y)."""
    return zoom_maxima(field, [(x0, y0)], half_width, accept, points, levels)[0]


def zoom_maxima(field, starts, half_width: float, accept, points: int = ZOOM_POINTS,
                levels: int = ZOOM_LEVELS) -> list[tuple[float, float, float]]:
    """:func:`zoom_maximum` from several starting points at once: each level evaluates the patches of every start
    in one call of ``field`` (the same searches, far fewer calls). Returns (value, x, y) per start."""
    starts = np.asarray(starts, float).reshape(-1, 2)
    if len(starts) == 0:
        return []
    first = np.asarray(field(starts), float)
    best = [(float(v), float(x), float(y)) for v, (x, y) in zip(first, starts)]
    half = half_width
    offsets = np.linspace(-1.0, 1.0, points)
    gx, gy = np.meshgrid(offsets, offsets)
    gx, gy = gx.ravel(), gy.ravel()
    for _ in range(levels):
        px = np.concatenate([b[1] + half * gx for b in best])
        py = np.concatenate([b[2] + half * gy for b in best])
        owner = np.repeat(np.arange(len(best)), len(gx))
        ok = accept(px, py)
        if ok.any():
            values = np.asarray(field(np.column_stack([px[ok], py[ok]])), float)
            qx, qy, who = px[ok], py[ok], owner[ok]
            for i in np.unique(who):
                mine = np.flatnonzero(who == i)
                k = mine[int(np.argmax(values[mine]))]
                if values[k] > best[i][0]:
                    best[i] = (float(values[k]), float(qx[k]), float(qy[k]))
        half /= (points - 1) / 2
    return best


def distinct_points(points, resolution: float) -> list[tuple[float, float]]:
    """The points in order, leaving out any within 1.5 map spacings of one already kept (a zoom search from
    it would find the same peak)."""
    kept: list[tuple[float, float]] = []
    for p in points:
        p = (float(p[0]), float(p[1]))
        if all(math.hypot(p[0] - q[0], p[1] - q[1]) > 1.5 * resolution for q in kept):
            kept.append(p)
    return kept


def worst_place(field, values, mask, grid, region, zoning: Zoning, k: int) -> Extreme | None:
    """Largest value over the map points in ``mask`` (zone k of ``region``), refined by a local search on
    the exact ``field`` (vectorised over (M, 2) points). A zone part of the region with area but no map point is
    evaluated at points inside it, so that a criterion is never passed without evidence. None when
    zone k holds no part of the region."""
    X, Y, resolution = grid
    part = zoning.part(region, k)
    candidates_xy = []
    if mask.any():
        flat = np.where(mask, values, -np.inf).ravel()
        for c in top_candidates(flat, X, Y):
            if np.isfinite(flat[c]):
                candidates_xy.append((float(X.ravel()[c]), float(Y.ravel()[c])))
    elif part.area > 1e-9:
        polys = getattr(part, "geoms", [part])
        candidates_xy = [p.representative_point().coords[0] for p in polys if p.area > 1e-9][:8]
    if part.area > 1e-9:
        # the edge of the area, sampled at a quarter of the map spacing: peaks of touch voltage sit on it
        # (the surface potential falls away from the metal) and a coarse map may hold no point near them
        edge = shapely.get_coordinates(shapely.segmentize(part.boundary, 0.25 * resolution))
        if len(edge) > MAX_EDGE_POINTS:
            edge = edge[np.linspace(0, len(edge) - 1, MAX_EDGE_POINTS).astype(int)]
        if len(edge):
            ok = shapely.intersects_xy(region, edge[:, 0], edge[:, 1]) & (zoning.label(edge[:, 0], edge[:, 1]) == k)
            edge = edge[ok]
        if len(edge):
            ev = field(edge)
            order = np.lexsort((edge[:, 0], edge[:, 1], -np.round(ev / (np.abs(ev).max() * TIE + 1e-300))))[:3]
            candidates_xy += [(float(edge[i, 0]), float(edge[i, 1])) for i in order]
    if not candidates_xy:
        return None

    def accept(px, py):
        return shapely.intersects_xy(region, px, py) & (zoning.label(px, py) == k)

    # best first, so that of two nearby candidates the better one (e.g. an edge point) is the one refined
    start = field(np.array(candidates_xy, float))
    order = np.lexsort((np.array(candidates_xy)[:, 0], np.array(candidates_xy)[:, 1], -start))
    best = None
    starts = distinct_points([candidates_xy[i] for i in order], resolution)
    for v, px, py in zoom_maxima(field, starts, resolution, accept):
        if best is None or beats(v, px, py, best):
            best = Extreme(v, px, py)
    return best


def touch_near_metal(m: SeparateMetal, segments: Segments, surface: SurfaceMap, potential, V, labels, grid,
                 zoning: Zoning) -> MetalTouch:
    """Touch voltages within reach of one separate electrode, per zone."""
    X, Y, resolution = grid
    _, reach = metal_footprint(segments, m.mask, max(surface.touch_reach, 1e-3))
    shapely.prepare(reach)
    near = shapely.intersects_xy(reach, X, Y)
    values = np.abs(m.potential - V)
    touch = tuple(worst_place(lambda xy: np.abs(m.potential - potential(xy)), values, near & (labels == k), grid,
                               reach, zoning, k) for k in range(len(zoning)))
    return MetalTouch(touch)
