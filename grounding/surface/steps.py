"""Step voltages: the map of the largest potential difference one step away, and the worst step per zone checked on the exact potential."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import shapely
from scipy.interpolate import RectBivariateSpline

from ..operators.potential import SurfacePotential
from .results import Extreme, beats, top_candidates
from .search import distinct_points, zoom_maxima, zoom_maximum
from .zoning import Zoning

#: Directions searched for the step voltage on the map.
STEP_DIRECTIONS = 16


class _PhasorSpline:
    """Bicubic spline of a real map, or of the real and imaginary parts of a phasor map."""

    def __init__(self, x, y, V):
        # cubic where the map has the points for it (a narrow map may have fewer than 4 along one side)
        kx, ky = min(3, len(x) - 1), min(3, len(y) - 1)
        self.re = RectBivariateSpline(x, y, V.real.T, kx=kx, ky=ky)
        self.im = RectBivariateSpline(x, y, V.imag.T, kx=kx, ky=ky) if np.iscomplexobj(V) else None

    def ev(self, px, py):
        out = self.re.ev(px, py)
        return out if self.im is None else out + 1j * self.im.ev(px, py)


def step_voltages(x, y, V, step_len, potential: SurfacePotential, zoning: Zoning, labels: np.ndarray,
                   coarse: np.ndarray | None = None, rings: shapely.Geometry | None = None):
    """Step-voltage map from a bicubic spline of the potential, and the worst step per zone checked
    exactly and refined, and again from the ``coarse`` map points when given (``Extreme.map_check``). A step
    belongs to the zone of the foot with the more severe zone.

    ``rings``: lines just outside the metal (the outlines of the touch areas), where step voltages peak (the
    steepest fall of the potential is just beyond the outer conductors, most of all at corners). They are sampled
    one step apart, independently of the map, and the best points are refined on the exact potential: a map
    coarser than a step cannot resolve that peak, and its spline smooths it away
    (a 20 m grid: 284 V found on a 4 m map against 704 V)."""
    resolution = float(x[1] - x[0]) if len(x) > 1 else 1.0
    spline = _PhasorSpline(x, y, V)

    def smooth(xy):
        xy = np.atleast_2d(xy)
        return spline.ev(np.clip(xy[:, 0], x[0], x[-1]), np.clip(xy[:, 1], y[0], y[-1]))

    X, Y = np.meshgrid(x, y)
    ang = np.pi * np.arange(STEP_DIRECTIONS) / STEP_DIRECTIONS
    step = np.zeros(V.shape)
    nz = len(zoning)
    per_zone = np.zeros((nz,) + V.shape)
    for t in ang:
        for sign in (1.0, -1.0):                    # both directions: every step is seen from both feet
            px, py = X + sign * step_len * np.cos(t), Y + sign * step_len * np.sin(t)
            inside = (px >= x[0]) & (px <= x[-1]) & (py >= y[0]) & (py <= y[-1])
            dv = np.where(inside, np.abs(spline.ev(np.clip(px, x[0], x[-1]), np.clip(py, y[0], y[-1])) - V), 0.0)
            step = np.maximum(step, dv)
            if nz == 1:
                per_zone[0] = step
                continue
            owner = zoning.worse(labels, zoning.label(px, py))
            for k in range(nz):
                per_zone[k] = np.maximum(per_zone[k], np.where(owner == k, dv, 0.0))
    # exact check around the best few map points of each zone: both ends of the step evaluated directly; then the
    # rings' best (independent of the map spacing), which counts for the map and for its check at twice the spacing
    ring, spacing = ring_points(rings, step_len)
    # a map at least as fine as a step screens the rings well enough on its spline (the peak is then within a few
    # per cent, far inside REFINE_SHARE); a coarser one smooths the peak away, so its rings are screened exactly
    inside = (x[0], x[-1], y[0], y[-1]) if resolution <= step_len else None
    screen = ring_screen(ring, step_len, potential, zoning, smooth, inside)
    out = []
    for k in range(nz):
        if nz > 1 and not ((labels == k).any() or (per_zone[k] > 0).any()):
            out.append(None)
            continue
        best = _exact_step(per_zone[k], X, Y, step_len, potential, zoning, k, resolution, smooth)
        check = None
        if best is not None and coarse is not None:
            check = _exact_step(np.where(coarse, per_zone[k], 0.0), X, Y, step_len, potential, zoning, k,
                                2 * resolution, smooth)
        if best is not None:
            bar = best.value if check is None else min(best.value, check.value)
            found = ring_refine(ring, spacing, screen[k], bar, step_len, potential, zoning, k)
            best, check = _better(best, found), _better(check, found)
        if best is not None and coarse is not None:
            best = replace(best, map_check=None if check is None else check.value)
        out.append(best)
    return step, out


#: Directions of the exact step check (half circle, each both ways), and of the zoom search for it.
EXACT_STEP_DIRECTIONS = 64
REFINE_STEP_DIRECTIONS = 12
#: Candidates within this share of the best exact value are refined.
REFINE_SHARE = 0.1
#: Most points sampled along the rings outside the metal; directions of their first (screening) step check; how
#: many of their best distinct points are refined on the exact potential.
MAX_RING_POINTS = 4000
RING_DIRECTIONS = 4
RING_STARTS = 3


def ring_points(rings: shapely.Geometry | None, spacing: float) -> tuple[np.ndarray, float]:
    """Points along ``rings`` (lines, m) at most ``spacing`` apart (further where that would exceed
    MAX_RING_POINTS), with every vertex (the corners, where steps peak): (points (M, 2), the spacing used, m);
    no points without rings."""
    if rings is None or rings.is_empty:
        return np.zeros((0, 2)), spacing
    spacing = max(spacing, rings.length / MAX_RING_POINTS)
    pts = shapely.get_coordinates(shapely.segmentize(rings, spacing))
    return (np.unique(np.round(pts, 9), axis=0) if len(pts) else np.zeros((0, 2))), spacing


def step_offsets(step_len: float, directions: int) -> np.ndarray:
    """The other foot's offsets (m) in ``directions`` directions over a half circle, each both ways;
    shape (2·directions, 2)."""
    ang = np.pi * np.arange(directions) / directions
    half = step_len * np.column_stack([np.cos(ang), np.sin(ang)])
    return np.concatenate([half, -half])


def steps_at(potential, xy: np.ndarray, step_len: float, zoning: "Zoning | None" = None, k: int = 0,
             directions: int = EXACT_STEP_DIRECTIONS) -> np.ndarray:
    """Largest potential difference (V) between each point and the points one step away, over
    2·``directions`` directions. ``potential`` is any vectorised function of (M, 2) points (the exact
    potential, or a spline of the map for a cheap search). With ``zoning``, only steps that belong to
    zone k (the zone of the more severe foot) count (−inf where none does). ``xy`` has shape (M, 2)."""
    xy = np.atleast_2d(np.asarray(xy, float))
    d = step_offsets(step_len, directions)
    ends = (xy[:, None, :] + d[None, :, :]).reshape(-1, 2)
    v = potential(np.vstack([xy, ends]))
    v0, ve = v[:len(xy)], v[len(xy):].reshape(len(xy), len(d))
    dv = np.abs(ve - v0[:, None])
    if zoning is not None and len(zoning) > 1:
        own = zoning.label(xy[:, 0], xy[:, 1])
        owner = zoning.worse(np.repeat(own, len(d)), zoning.label(ends[:, 0], ends[:, 1])).reshape(dv.shape)
        dv = np.where(owner == k, dv, -np.inf)
    return dv.max(axis=1)


def step_at(potential, px: float, py: float, step_len: float) -> float:
    """Largest potential difference (V) between (px, py) and the points one step away (exact)."""
    return float(steps_at(potential, np.array([[px, py]]), step_len)[0])


def _better(a: Extreme | None, b: Extreme | None) -> Extreme | None:
    """The larger of two extremes (ties: first by y, then x); a missing one loses. Only a zone that has map
    points is judged (``a`` None stays None: the zone's warning says why)."""
    if a is None or b is None:
        return a
    return b if beats(b.value, b.x, b.y, a) else a


def ring_screen(ring: np.ndarray, step_len: float, potential, zoning: Zoning, smooth=None,
                inside: tuple[float, float, float, float] | None = None) -> np.ndarray:
    """The step voltage at each ``ring`` point (:func:`ring_points`) in RING_DIRECTIONS directions, per zone
    (−inf where no step of the zone starts there), V; shape (zones, M). Evaluated on the exact ``potential``, or
    on ``smooth`` (the map's spline) where both feet lie ``inside`` the map (x0, x1, y0, y1), m, when given."""
    nz = len(zoning)
    if not len(ring):
        return np.zeros((nz, 0))
    d = step_offsets(step_len, RING_DIRECTIONS)
    ends = (ring[:, None, :] + d[None, :, :]).reshape(-1, 2)
    pts = np.vstack([ring, ends])
    if inside is None or smooth is None:
        v = potential(pts)
    else:
        x0, x1, y0, y1 = inside
        in_map = (pts[:, 0] >= x0) & (pts[:, 0] <= x1) & (pts[:, 1] >= y0) & (pts[:, 1] <= y1)
        both = in_map[:len(ring)] & in_map[len(ring):].reshape(len(ring), -1).all(axis=1)
        on_map = np.concatenate([both, np.repeat(both, len(d))])
        on, off = smooth(pts[on_map]), (potential(pts[~on_map]) if (~on_map).any() else np.zeros(0))
        v = np.empty(len(pts), np.result_type(on, off))
        v[on_map], v[~on_map] = on, off
    dv = np.abs(v[len(ring):].reshape(len(ring), len(d)) - v[:len(ring), None])
    if nz == 1:
        return dv.max(axis=1)[None, :]
    owner = zoning.worse(np.repeat(zoning.label(ring[:, 0], ring[:, 1]), len(d)),
                         zoning.label(ends[:, 0], ends[:, 1])).reshape(dv.shape)
    return np.stack([np.where(owner == k, dv, -np.inf).max(axis=1) for k in range(nz)])


def ring_refine(ring: np.ndarray, spacing: float, screen: np.ndarray, bar: float, step_len: float, potential,
                zoning: Zoning, k: int) -> Extreme | None:
    """The largest step voltage of zone k near the ``ring`` points whose screened value (:func:`ring_screen`)
    comes within REFINE_SHARE of ``bar`` (the zone's best from the map, V): the best RING_STARTS distinct ones
    refined by a zoom search on the exact potential (half-width the ring spacing) and the points found
    evaluated in the full set of directions. None where no ring point comes that close."""
    ok = np.flatnonzero(np.isfinite(screen) & (screen >= (1 - REFINE_SHARE) * bar))
    if not len(ok):
        return None
    order = ok[np.lexsort((ring[ok, 0], ring[ok, 1], -screen[ok]))]
    starts = distinct_points(ring[order[:50 * RING_STARTS]], 2 * spacing)[:RING_STARTS]
    found = zoom_maxima(lambda p: steps_at(potential, p, step_len, zoning, k, REFINE_STEP_DIRECTIONS), starts,
                        spacing, lambda px, py: np.ones(np.shape(px), bool), points=5, levels=4)
    xy = np.array([(qx, qy) for _, qx, qy in found])
    best = None
    for value, (qx, qy) in zip(steps_at(potential, xy, step_len, zoning, k), xy):
        if np.isfinite(value) and (best is None or beats(float(value), float(qx), float(qy), best)):
            best = Extreme(float(value), float(qx), float(qy))
    return best


def _exact_step(values, X, Y, step_len, potential, zoning: Zoning, k: int, resolution: float,
                smooth=None) -> Extreme | None:
    """The best few map points of ``values`` checked exactly (both feet evaluated directly); those within
    REFINE_SHARE of the best refined by a zoom search of the step voltage on ``smooth`` (a bicubic spline of
    the map; the exact potential when None), and the point found evaluated exactly in the full set of
    directions (kept only if it beats the map point)."""
    search = potential if smooth is None else smooth
    cand = [c for c in top_candidates(values, X, Y) if values.ravel()[c] > -np.inf]
    if not cand:
        return None
    xy = np.column_stack([X.ravel()[cand], Y.ravel()[cand]])
    first = steps_at(potential, xy, step_len, zoning, k)
    if not np.isfinite(first).any():
        return None
    best = None
    start = {(float(p[0]), float(p[1])): float(v0) for p, v0 in zip(xy, first)}
    for px, py in distinct_points([p for p, v0 in start.items() if v0 >= (1 - REFINE_SHARE) * np.max(first)], resolution):
        v0 = start[(px, py)]
        _, qx, qy = zoom_maximum(lambda p: steps_at(search, p, step_len, zoning, k, REFINE_STEP_DIRECTIONS),
                            float(px), float(py), 0.5 * resolution, lambda x, y: np.ones(np.shape(x), bool),
                            points=5, levels=5)
        v = float(steps_at(potential, np.array([[qx, qy]]), step_len, zoning, k)[0])
        if v < v0:                                          # the coarse-direction search may mislead
            v, qx, qy = float(v0), float(px), float(py)
        if np.isfinite(v) and (best is None or beats(v, qx, qy, best)):
            best = Extreme(v, qx, qy)
    return best
