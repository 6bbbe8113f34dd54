"""Surface fields: earth-surface potential from the leakage currents, touch, step and mesh voltages.

The potential at a surface point is Σ_j I_j/L_j ∫_j G ds', with the same three-tier treatment as
assembly (exact near terms, 2-point Gauss in the middle range, midpoints far away). Touch voltage is
GPR − surface potential over the touch area; step voltage the largest potential difference between
a point and the points one step away; mesh voltage the largest touch voltage inside grid meshes.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import shapely
from scipy.interpolate import RectBivariateSpline
from scipy.optimize import minimize
from scipy.spatial import cKDTree
from scipy.spatial.distance import cdist
from shapely.geometry import LineString, MultiLineString, MultiPoint, Point, Polygon
from shapely.ops import polygonize, unary_union

from .assembly import MAX_DEPTH_CLASSES, AssemblyOptions, near_term_sum
from .case import SurfaceMap
from .geometry import Segments
from .integrals import GAUSS2, line_integral
from .soil.base import DEPTH_QUANTUM, SoilKernel

Progress = Callable[[str, float], None]

#: Surface points per chunk of the far-field evaluation.
POINT_CHUNK = 2048
#: Directions searched for the step voltage on the map.
STEP_DIRECTIONS = 16


class SurfacePotential:
    """Earth-surface potential (V) of given segment currents, evaluated at any surface points.

    Parameters
    ----------
    segments : Segments
        The electrodes.
    currents : ndarray, shape (N,)
        Segment leakage currents, A.
    kernel : SoilKernel
        Soil Green's function.
    options : AssemblyOptions
        Tier limits, in segment lengths.
    """

    def __init__(self, segments: Segments, currents: np.ndarray, kernel: SoilKernel,
                 options: AssemblyOptions = AssemblyOptions()):
        self.segments, self.currents, self.kernel, self.options = segments, currents, kernel, options
        self.mid = segments.midpoint
        self.L = segments.length
        depth = np.round(self.mid[:, 2] / DEPTH_QUANTUM).astype(np.int64)
        classes, cls = np.unique(depth, return_inverse=True)
        # few burial depths: one radial function per depth; very many (sloping conductors): point pairs
        self.members = None if len(classes) > MAX_DEPTH_CLASSES else \
            [(kernel.radial(0.0, classes[k] * DEPTH_QUANTUM), np.flatnonzero(cls.ravel() == k))
             for k in range(len(classes))]
        self.tree = cKDTree(self.mid)

    def __call__(self, xy: np.ndarray, progress: Progress | None = None) -> np.ndarray:
        """Potential relative to remote earth (V) at surface points ``xy`` (m), shape (M, 2) → (M,)."""
        xy = np.atleast_2d(np.asarray(xy, float))
        m = len(xy)
        mid, L, currents, kernel = self.mid, self.L, self.currents, self.kernel
        out = np.zeros(m)
        for start in range(0, m, POINT_CHUNK):
            rows = slice(start, min(m, start + POINT_CHUNK))
            if self.members is None:
                out[rows] += kernel.potential(cdist(xy[rows], mid[:, :2]), 0.0, mid[None, :, 2]) @ currents
            for radial, cols in self.members or ():
                out[rows] += radial(cdist(xy[rows], mid[cols, :2])) @ currents[cols]
            if progress:
                progress("surface", 0.8 * rows.stop / m)
        # near and middle corrections: accurate value minus the midpoint value already added
        p3 = np.column_stack([xy, np.zeros(m)])
        reach = self.options.mid_reach * L.max()
        if m > 64:
            pairs = cKDTree(p3).sparse_distance_matrix(self.tree, reach, output_type="ndarray")
            pi, sj, d = pairs["i"].astype(np.intp), pairs["j"].astype(np.intp), pairs["v"]
        else:
            hits = self.tree.query_ball_point(p3, reach)
            pi = np.repeat(np.arange(m), [len(h) for h in hits]).astype(np.intp)
            sj = np.concatenate([np.asarray(h, dtype=np.intp) for h in hits]) if m else np.zeros(0, np.intp)
            d = np.linalg.norm(p3[pi] - mid[sj], axis=1)
        keep = d < self.options.mid_reach * L[sj]
        pi, sj, d = pi[keep], sj[keep], d[keep]
        near = d < self.options.near_reach * L[sj]
        a, b = self.segments.start, self.segments.end
        for sel, exact in ((near, True), (~near, False)):
            ii, jj = pi[sel], sj[sel]
            for s0 in range(0, len(ii), 100_000):
                i, j = ii[s0:s0 + 100_000], jj[s0:s0 + 100_000]
                accurate = _near_point_values(p3[i], self.segments, kernel, j) if exact else \
                    _gauss_point_values(kernel.potential, p3[i], a[j], b[j])
                coarse = kernel.potential(np.linalg.norm(p3[i, :2] - mid[j, :2], axis=1), 0.0, mid[j, 2])
                out += np.bincount(i, (accurate - coarse) * currents[j], minlength=m)
        if progress:
            progress("surface", 1.0)
        return out


def surface_potential(xy: np.ndarray, segments: Segments, currents: np.ndarray, kernel: SoilKernel,
                      options: AssemblyOptions = AssemblyOptions(),
                      progress: Progress | None = None) -> np.ndarray:
    """Earth-surface potential (V) at points ``xy`` (m, shape (M, 2)); see :class:`SurfacePotential`."""
    return SurfacePotential(segments, currents, kernel, options)(xy, progress)


def _gauss_point_values(evaluate, p, a, b) -> np.ndarray:
    """Mean of the kernel over 2 Gauss points of each segment, seen from points p."""
    g = GAUSS2[0]
    q = a[:, None, :] + g[None, :, None] * (b - a)[:, None, :]
    r = np.linalg.norm(q[..., :2] - p[:, None, :2], axis=-1)
    return evaluate(r, np.broadcast_to(p[:, None, 2], r.shape), q[..., 2]).mean(axis=1)


def _near_point_values(p, segments: Segments, kernel: SoilKernel, j) -> np.ndarray:
    """(1/L_j) ∫_j G(p, x') ds' with the near terms in closed form and the remainder by Gauss."""
    a, b, L = segments.start[j], segments.end[j], segments.length[j]
    # the thin-wire offset applies only inside the metal; elsewhere the exact distance is used
    t = np.clip(np.einsum("ij,ij->i", p - a, b - a) / (L * L), 0.0, 1.0)
    inside = np.linalg.norm(p - (a + t[:, None] * (b - a)), axis=1) < segments.radius[j]
    offset = np.where(inside, segments.radius[j], 0.0)
    exact = near_term_sum(kernel, p[:, 2], a, b, lambda m, c, d: line_integral(p[m], c, d, offset[m]))
    return exact / L + _gauss_point_values(kernel.remainder, p, a, b)


def touch_region(segments: Segments, surface: SurfaceMap) -> tuple[shapely.Geometry, shapely.Geometry]:
    """The touch area and the grid meshes, as shapely geometries in the x–y plane (m).

    The default touch area is the union of the closed meshes the horizontal conductors form and
    everything within ``touch_reach`` of any conductor or rod; an explicit ``touch_area`` polygon
    replaces it. The meshes are the faces of the noded horizontal-conductor network.
    """
    horizontal = ~segments.conductors.is_rod
    c = segments.conductors
    lines = [LineString([tuple(c.start[k, :2]), tuple(c.end[k, :2])]) for k in np.flatnonzero(horizontal)
             if np.linalg.norm(c.start[k, :2] - c.end[k, :2]) > 1e-6]
    noded = unary_union(MultiLineString(lines)) if lines else None
    meshes = unary_union(list(polygonize(noded))) if noded is not None else Polygon()
    if surface.touch_area is not None:
        return Polygon(surface.touch_area), meshes
    parts = [meshes]
    if noded is not None:
        parts.append(noded.buffer(surface.touch_reach))
    if (~horizontal).any():
        parts.append(MultiPoint([tuple(p) for p in c.start[~horizontal, :2]]).buffer(max(surface.touch_reach, 1e-3)))
    return unary_union(parts), meshes


@dataclass(frozen=True)
class Extreme:
    """A maximum over the surface: value (V) and location (x, y in m)."""

    value: float
    x: float
    y: float

    def scaled(self, factor: float) -> "Extreme":
        """The same point with the value multiplied by ``factor``."""
        return Extreme(self.value * factor, self.x, self.y)


@dataclass(frozen=True)
class SurfaceResult:
    """Surface potentials and the touch, step and mesh voltages derived from them.

    Attributes
    ----------
    x, y : ndarray
        Map axes, m.
    potential : ndarray, shape (len(y), len(x))
        Surface potential, V.
    touch : ndarray, shape (len(y), len(x))
        Touch voltage GPR − potential inside the touch area, NaN outside, V.
    step : ndarray, shape (len(y), len(x))
        Largest potential difference to a point one step away, V.
    touch_area, meshes : shapely geometry
        Where touch voltage counts; the grid meshes.
    max_touch, max_step : Extreme
        Worst touch and step voltages.
    max_mesh : Extreme or None
        Worst touch voltage inside the meshes; None when the layout has no closed mesh.
    probe_potential : ndarray
        Surface potential at the case's probe points, V.
    profile : Profile
        Surface potential along the profile line.
    """

    x: np.ndarray
    y: np.ndarray
    potential: np.ndarray
    touch: np.ndarray
    step: np.ndarray
    touch_area: shapely.Geometry
    meshes: shapely.Geometry
    max_touch: Extreme
    max_step: Extreme
    max_mesh: Extreme | None
    probe_potential: np.ndarray
    profile: "Profile"

    def scaled(self, factor: float) -> "SurfaceResult":
        """Every voltage multiplied by ``factor`` (fields are linear in the GPR; locations are unchanged)."""
        p = self.profile
        return SurfaceResult(self.x, self.y, self.potential * factor, self.touch * factor, self.step * factor,
                             self.touch_area, self.meshes, self.max_touch.scaled(factor),
                             self.max_step.scaled(factor), self.max_mesh.scaled(factor) if self.max_mesh else None,
                             self.probe_potential * factor, Profile(p.distance, p.x, p.y, p.potential * factor))


@dataclass(frozen=True)
class Profile:
    """Surface potential along a straight line: distance along it, x, y (m) and potential (V)."""

    distance: np.ndarray
    x: np.ndarray
    y: np.ndarray
    potential: np.ndarray


#: Points along the potential profile.
PROFILE_POINTS = 301


def map_axes(segments: Segments, surface: SurfaceMap) -> tuple[np.ndarray, np.ndarray]:
    """Map axes covering the electrode footprint plus the margin, m."""
    pts = np.vstack([segments.start[:, :2], segments.end[:, :2]])
    lo = pts.min(axis=0) - surface.margin
    hi = pts.max(axis=0) + surface.margin
    if surface.touch_area is not None:
        ta = np.array(surface.touch_area)
        lo, hi = np.minimum(lo, ta.min(axis=0)), np.maximum(hi, ta.max(axis=0))
    n = np.maximum(2, np.ceil((hi - lo) / surface.resolution - 1e-9).astype(int) + 1)
    return (lo[0] + surface.resolution * np.arange(n[0]), lo[1] + surface.resolution * np.arange(n[1]))


def _refine_minimum(f, x0, y0, half_width, region) -> tuple[float, float, float]:
    """Local minimum of f(x, y) near (x0, y0) within a box and a region; returns (f, x, y)."""
    best = (f(x0, y0), x0, y0)
    res = minimize(lambda v: f(v[0], v[1]), np.array([x0, y0]), method="Powell",
                   bounds=[(x0 - half_width, x0 + half_width), (y0 - half_width, y0 + half_width)],
                   options={"xtol": 1e-3, "ftol": 1e-9, "maxfev": 200})
    if res.fun < best[0] and region.covers(Point(res.x[0], res.x[1])):
        best = (float(res.fun), float(res.x[0]), float(res.x[1]))
    return best


def surface_fields(segments: Segments, currents: np.ndarray, gpr: float, kernel: SoilKernel,
                   surface: SurfaceMap, probes: tuple[tuple[float, float], ...] = (),
                   options: AssemblyOptions = AssemblyOptions(),
                   progress: Progress | None = None) -> SurfaceResult:
    """Map the surface and find the worst touch, step and mesh voltages.

    Parameters
    ----------
    segments : Segments
        The electrodes.
    currents : ndarray
        Segment leakage currents, A.
    gpr : float
        Ground potential rise, V.
    kernel : SoilKernel
        Soil Green's function.
    surface : SurfaceMap
        Map extent, resolution, touch area and step length.
    probes : sequence of (x, y)
        Extra points of interest, m.
    """
    x, y = map_axes(segments, surface)
    X, Y = np.meshgrid(x, y)
    pts = np.column_stack([X.ravel(), Y.ravel()])
    potential = SurfacePotential(segments, currents, kernel, options)
    V = potential(pts, progress).reshape(X.shape)

    def exact(px, py):
        return float(potential(np.array([[px, py]]))[0])

    area, meshes = touch_region(segments, surface)
    in_area = shapely.contains_xy(area, X, Y) | shapely.intersects_xy(area.boundary, X, Y)
    touch = np.where(in_area, gpr - V, np.nan)
    max_touch = _worst_touch(touch, X, Y, exact, gpr, surface.resolution, area)
    in_mesh = shapely.contains_xy(meshes, X, Y) if not meshes.is_empty else np.zeros_like(in_area)
    max_mesh = None
    if in_mesh.any():
        max_mesh = _worst_touch(np.where(in_mesh, gpr - V, np.nan), X, Y, exact, gpr, surface.resolution, meshes)
    step, max_step = _step_voltages(x, y, V, surface.step_distance, potential)
    probe_v = potential(np.array(probes, float).reshape(-1, 2)) if probes else np.zeros(0)
    (x0, y0), (x1, y1) = surface.profile or ((x[0], y[0]), (x[-1], y[-1]))
    f = np.linspace(0.0, 1.0, PROFILE_POINTS)
    px, py = x0 + f * (x1 - x0), y0 + f * (y1 - y0)
    profile = Profile(f * np.hypot(x1 - x0, y1 - y0), px, py, potential(np.column_stack([px, py])))
    return SurfaceResult(x, y, V, touch, step, area, meshes, max_touch, max_step, max_mesh, probe_v, profile)


#: Values closer than this (relative) are ties, broken by position, so that symmetric layouts report
#: the same point whatever the rounding of the machine or the BLAS threads.
TIE = 1e-9


def _top_candidates(values: np.ndarray, X: np.ndarray, Y: np.ndarray, count: int = 3) -> np.ndarray:
    """Indices of the largest values, ties (within TIE) ordered by y, then x."""
    flat = values.ravel()
    finite = np.isfinite(flat)
    top = np.max(np.abs(flat[finite])) if finite.any() else 1.0
    q = np.where(finite, np.round(flat / (top * TIE + 1e-300)), -np.inf)
    return np.lexsort((X.ravel(), Y.ravel(), -q))[:count]


def _better(value: float, x: float, y: float, best: Extreme) -> bool:
    """Whether (value, x, y) beats ``best``: larger beyond TIE, or tied and first by y, then x."""
    scale = max(abs(value), abs(best.value), 1e-300) * TIE
    if value > best.value + scale:
        return True
    return abs(value - best.value) <= scale and (round(y, 6), round(x, 6)) < (round(best.y, 6), round(best.x, 6))


def _worst_touch(touch, X, Y, exact, gpr, resolution, region) -> Extreme:
    """Largest touch voltage: the best map points, refined by a local search on the exact potential."""
    flat = np.where(np.isnan(touch), -np.inf, touch).ravel()
    candidates = _top_candidates(flat, X, Y)
    best = Extreme(float(flat[candidates[0]]), float(X.ravel()[candidates[0]]), float(Y.ravel()[candidates[0]]))
    for c in candidates:
        if not np.isfinite(flat[c]):
            continue
        v, px, py = _refine_minimum(exact, float(X.ravel()[c]), float(Y.ravel()[c]), resolution, region)
        if _better(gpr - v, px, py, best):
            best = Extreme(gpr - v, px, py)
    return best


def _step_voltages(x, y, V, step_len, potential: SurfacePotential):
    """Step-voltage map from a bicubic spline of the potential, and its maximum checked exactly."""
    spline = RectBivariateSpline(x, y, V.T, kx=3, ky=3)
    X, Y = np.meshgrid(x, y)
    ang = np.pi * np.arange(STEP_DIRECTIONS) / STEP_DIRECTIONS          # half circle: |ΔV| is symmetric
    step = np.zeros_like(V)
    for t in ang:
        px, py = X + step_len * np.cos(t), Y + step_len * np.sin(t)
        inside = (px >= x[0]) & (px <= x[-1]) & (py >= y[0]) & (py <= y[-1])
        dv = np.abs(spline.ev(np.clip(px, x[0], x[-1]), np.clip(py, y[0], y[-1])) - V)
        step = np.maximum(step, np.where(inside, dv, 0.0))
    # exact check around the best few map points: both ends of the step evaluated directly
    best = Extreme(0.0, float(x[0]), float(y[0]))
    fine = np.pi * np.arange(64) / 64
    for c in _top_candidates(step, X, Y):
        px, py = X.ravel()[c], Y.ravel()[c]
        ends = np.column_stack([np.r_[px, px + step_len * np.cos(fine), px - step_len * np.cos(fine)],
                                np.r_[py, py + step_len * np.sin(fine), py - step_len * np.sin(fine)]])
        v = potential(ends)
        dv = float(np.abs(v[1:] - v[0]).max())
        if _better(dv, float(px), float(py), best):
            best = Extreme(dv, float(px), float(py))
    return step, best
