"""Surface fields: earth-surface potential from the leakage currents, touch, step and mesh voltages.

The potential at a surface point is Σ_j I_j/L_j ∫_j G ds', with the same three-tier treatment as
assembly (exact near terms, 2-point Gauss in the middle range, midpoints far away). Touch voltage is
GPR − surface potential over the touch area; step voltage the largest potential difference between
a point and the points one step away; mesh voltage the largest touch voltage inside grid meshes.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Callable

import numpy as np
import shapely
from scipy.interpolate import RectBivariateSpline
from scipy.spatial import cKDTree
from scipy.spatial.distance import cdist
from shapely.geometry import LineString, MultiLineString, MultiPoint, Polygon
from shapely.ops import polygonize, unary_union

from .assembly import MAX_DEPTH_CLASSES, AssemblyOptions, gauss_points, near_term_sum
from .case import SurfaceMap
from .case_site import shapely_polygon
from .geometry import Segments
from .hmatrix import apply_once, threaded_map
from .integrals import GAUSS2, line_integral
from .soil.base import DEPTH_QUANTUM, SoilKernel

Progress = Callable[[str, float], None]

#: Surface points per chunk of the far-field evaluation.
POINT_CHUNK = 2048
#: (point, segment) pairs per chunk of the near corrections.
PAIR_CHUNK = 100_000
#: From this many (point, segment) pairs the map's far field uses the hierarchical matrix.
COMPRESS_FROM_PAIRS = 50_000_000
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
        # phasor currents (conductors with impedance): the real and imaginary parts as two columns
        self.columns = np.column_stack([currents.real, currents.imag]) if np.iscomplexobj(currents) else \
            np.asarray(currents, float)[:, None]
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
        mid, L, currents, kernel = self.mid, self.L, self.columns, self.kernel
        k = currents.shape[1]
        out = np.zeros((m, k))
        a, b = self.segments.start, self.segments.end
        compressed = m * len(mid) >= COMPRESS_FROM_PAIRS
        if compressed:
            # large maps: the hierarchical far field of the segments' 2-point Gauss–Legendre sources (the
            # middle tier's rule, so that only near pairs need correcting), interpolated to about 1e-5
            sources = gauss_points(a, b).reshape(-1, 3)
            for c in range(k):
                out[:, c] += apply_once(kernel.potential, np.column_stack([xy, np.zeros(m)]), sources,
                                        np.repeat(0.5 * currents[:, c], 2), source_layer=kernel.layer_of(sources[:, 2]),
                                        progress=(lambda _s, f: progress("surface", 0.8 * f)) if progress else None)
        for start in range(0, 0 if compressed else m, POINT_CHUNK):
            rows = slice(start, min(m, start + POINT_CHUNK))
            if self.members is None:
                out[rows] += kernel.potential(cdist(xy[rows], mid[:, :2]), 0.0, mid[None, :, 2]) @ currents
            for radial, cols in self.members or ():
                out[rows] += radial(cdist(xy[rows], mid[cols, :2])) @ currents[cols]
            if progress:
                progress("surface", 0.8 * rows.stop / m)
        # near (and, for the midpoint far field, middle) corrections: accurate value minus the value added
        p3 = np.column_stack([xy, np.zeros(m)])
        tier = self.options.near_reach if compressed else self.options.mid_reach
        reach = tier * L.max()
        if m > 64:
            pairs = cKDTree(p3).sparse_distance_matrix(self.tree, reach, output_type="ndarray")
            pi, sj, d = pairs["i"].astype(np.intp), pairs["j"].astype(np.intp), pairs["v"]
        else:
            hits = self.tree.query_ball_point(p3, reach)
            pi = np.repeat(np.arange(m), [len(h) for h in hits]).astype(np.intp)
            sj = np.concatenate([np.asarray(h, dtype=np.intp) for h in hits]) if m else np.zeros(0, np.intp)
            d = np.linalg.norm(p3[pi] - mid[sj], axis=1)
        keep = d < tier * L[sj]
        pi, sj, d = pi[keep], sj[keep], d[keep]
        near = d < self.options.near_reach * L[sj]
        def correction(task):
            i, j, exact = task
            gauss = _gauss_point_values(kernel.potential, p3[i], a[j], b[j]) if compressed or not exact else None
            accurate = _near_point_values(p3[i], self.segments, kernel, j) if exact else gauss
            coarse = gauss if compressed else \
                kernel.potential(np.linalg.norm(p3[i, :2] - mid[j, :2], axis=1), 0.0, mid[j, 2])
            return np.column_stack([np.bincount(i, (accurate - coarse) * currents[j, c], minlength=m)
                                    for c in range(k)])

        tasks = []
        for sel, exact in ((near, True), (~near, False)):
            ii, jj = pi[sel], sj[sel]
            tasks += [(ii[s0:s0 + PAIR_CHUNK], jj[s0:s0 + PAIR_CHUNK], exact) for s0 in range(0, len(ii), PAIR_CHUNK)]
        for part in threaded_map(correction, tasks):
            out += part
        if progress:
            progress("surface", 1.0)
        return out[:, 0] + 1j * out[:, 1] if k == 2 else out[:, 0]


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


def metal_footprint(segments: Segments, mask: np.ndarray, reach: float) -> tuple[shapely.Geometry, shapely.Geometry]:
    """Plan view of the conductors selected by ``mask``: (meshes they form, everything within ``reach``
    of them), shapely geometries in the x–y plane (m)."""
    c = segments.conductors
    horizontal = ~c.is_rod & mask
    lines = [LineString([tuple(c.start[k, :2]), tuple(c.end[k, :2])]) for k in np.flatnonzero(horizontal)
             if np.linalg.norm(c.start[k, :2] - c.end[k, :2]) > 1e-6]
    noded = unary_union(MultiLineString(lines)) if lines else None
    meshes = unary_union(list(polygonize(noded))) if noded is not None else Polygon()
    parts = []
    if noded is not None:
        parts.append(noded.buffer(reach))
    rods = c.is_rod & mask
    if rods.any():
        parts.append(MultiPoint([tuple(p) for p in c.start[rods, :2]]).buffer(max(reach, 1e-3)))
    return meshes, unary_union(parts) if parts else Polygon()


def describe_place(segments: Segments, meshes: shapely.Geometry, x: float, y: float) -> str:
    """Where a surface point lies relative to the main system, in words: inside a grid mesh, beside the free
    end of a conductor (a lead-out tip), or outside the meshes beside a conductor or rod."""
    if not meshes.is_empty and meshes.buffer(1e-6).covers(shapely.Point(x, y)):
        return "inside a grid mesh"
    c = segments.conductors
    main = np.flatnonzero(c.group == 0)
    p = np.array([x, y])
    a, b = c.start[main, :2], c.end[main, :2]
    d = b - a
    L2 = np.einsum("ij,ij->i", d, d)
    t = np.clip(np.einsum("ij,ij->i", p - a, d) / np.where(L2 > 0, L2, 1.0), 0.0, 1.0)
    foot = a + t[:, None] * d
    dist = np.linalg.norm(foot - p, axis=1)
    k = int(np.argmin(dist))
    key = c.keys[main[k]].split(" + ")[0]
    if c.is_rod[main[k]]:
        return f"{dist[k]:.1f} m from the rod {key}, outside the grid meshes"
    if t[k] in (0.0, 1.0):
        end = foot[k]
        others = np.delete(np.arange(len(main)), k)
        touching = np.min(np.linalg.norm(np.vstack([a[others], b[others]]) - end, axis=1)) if len(others) else np.inf
        near_line = np.min(dist[others]) if len(others) else np.inf
        if touching > 1e-3 and near_line > 1e-3:
            return f"{dist[k]:.1f} m beyond the free end of {key} (a lead-out tip), outside the grid meshes"
    return f"{dist[k]:.1f} m outside the grid meshes, beside {key}"


def touch_region(segments: Segments, surface: SurfaceMap) -> tuple[shapely.Geometry, shapely.Geometry]:
    """The touch area of the main (energised) system and its grid meshes, as shapely geometries in the
    x–y plane (m).

    The default touch area is the union of the closed meshes the horizontal conductors of the
    ``electrodes`` block form and everything within ``touch_reach`` of any conductor or rod of the main
    system (bonded separate electrodes included). ``surface.touch_areas`` replaces it with explicit areas
    and reaches around named metal (each with the meshes that metal forms). The meshes used for the
    mesh voltage are always those of the ``electrodes`` block.
    """
    c = segments.conductors
    main = c.group == 0
    block = main & c.matching(("electrodes",))
    meshes, _ = metal_footprint(segments, block, 0.0)
    if not surface.touch_areas:
        _, reach = metal_footprint(segments, main, surface.touch_reach)
        return unary_union([meshes, reach]), meshes
    parts = []
    for t in surface.touch_areas:
        if t.area is not None:
            parts.append(shapely_polygon(t.area))
        else:
            sel = main & (c.matching(t.metal) if t.metal else True)
            parts.extend(metal_footprint(segments, sel, t.reach))
    return unary_union(parts), meshes


@dataclass(frozen=True)
class Extreme:
    """A maximum over the surface: value (V) and location (x, y in m).

    ``map_check`` is the same maximum found from a map of twice the spacing, and ``segment_check`` the
    value at the same point from the solve at twice the segment length (both V; None when not made):
    the two sources of discretisation error of the value.
    """

    value: float
    x: float
    y: float
    map_check: float | None = None
    segment_check: float | None = None

    def scaled(self, factor: float) -> "Extreme":
        """The same point with the value multiplied by ``factor``."""
        def sc(v):
            return None if v is None else v * factor
        return Extreme(self.value * factor, self.x, self.y, sc(self.map_check), sc(self.segment_check))

    def error(self, order: float = 1.0) -> float | None:
        """Estimated discretisation error of the value, V: |value − segment_check| / (2^order − 1) (Richardson,
        convergence order ``order`` in the segment length) plus |value − map_check| (map spacing);
        None when neither check was made."""
        if self.map_check is None and self.segment_check is None:
            return None
        seg = 0.0 if self.segment_check is None else abs(self.value - self.segment_check) / (2 ** order - 1)
        return seg + (0.0 if self.map_check is None else abs(self.value - self.map_check))


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
    zones : tuple of ZoneExtremes
        Worst touch, step and mesh voltages per zone (one zone: the whole map).
    metal : tuple of MetalTouch
        Per separate electrode: worst touch voltage per zone within reach of it.
    zone_labels : ndarray of int, shape of the map
        The zone each map point stands in (index into ``zones``).
    probe_touch : ndarray or None
        Touch voltage at the probes, V, where it is not GPR − potential (conductors with impedance:
        |V_metal − V_surface| with the nearest energised metal); None otherwise.
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
    zones: tuple["ZoneExtremes", ...] = ()
    metal: tuple["MetalTouch", ...] = ()
    zone_labels: np.ndarray | None = None
    probe_touch: np.ndarray | None = None

    def scaled(self, factor: float) -> "SurfaceResult":
        """Every voltage multiplied by ``factor`` (fields are linear in the GPR; locations are unchanged)."""
        p = self.profile
        return SurfaceResult(self.x, self.y, self.potential * factor, self.touch * factor, self.step * factor,
                             self.touch_area, self.meshes, _scale(self.max_touch, factor),
                             _scale(self.max_step, factor), _scale(self.max_mesh, factor),
                             self.probe_potential * factor, Profile(p.distance, p.x, p.y, p.potential * factor),
                             tuple(z.scaled(factor) for z in self.zones), tuple(m.scaled(factor) for m in self.metal),
                             self.zone_labels, None if self.probe_touch is None else self.probe_touch * factor)


def _scale(ext: "Extreme | None", factor: float) -> "Extreme | None":
    return None if ext is None else ext.scaled(factor)


@dataclass(frozen=True)
class ZoneExtremes:
    """Worst voltages within one zone (V, at x, y in m); None where the zone holds no such place.

    A step belongs to the zone of the foot with the more severe (lower) limit.
    """

    touch: Extreme | None
    step: Extreme | None
    mesh: Extreme | None

    def scaled(self, factor: float) -> "ZoneExtremes":
        """The same points with values multiplied by ``factor``."""
        return ZoneExtremes(_scale(self.touch, factor), _scale(self.step, factor), _scale(self.mesh, factor))


@dataclass(frozen=True)
class MetalTouch:
    """Touch voltages |V_metal − V_surface| within reach of one separate electrode, per zone (V)."""

    touch: tuple[Extreme | None, ...]

    def scaled(self, factor: float) -> "MetalTouch":
        """The same points with values multiplied by ``factor``."""
        return MetalTouch(tuple(_scale(t, factor) for t in self.touch))


@dataclass(frozen=True)
class SeparateMetal:
    """What the surface stage needs of a separate electrode: the segments it owns and its potential (V)."""

    mask: np.ndarray
    potential: float


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
    for t in surface.touch_areas:
        if t.area is not None:
            ta = np.array(t.area.shell)
            lo, hi = np.minimum(lo, ta.min(axis=0)), np.maximum(hi, ta.max(axis=0))
    n = np.maximum(2, np.ceil((hi - lo) / surface.resolution - 1e-9).astype(int) + 1)
    return (lo[0] + surface.resolution * np.arange(n[0]), lo[1] + surface.resolution * np.arange(n[1]))


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


#: Most points sampled along the edge of an area when searching its worst point.
MAX_EDGE_POINTS = 20_000
#: Zoom search for a local maximum: points per side of each patch, and zoom levels.
ZOOM_POINTS = 7
ZOOM_LEVELS = 4


def _refine(field, x0: float, y0: float, half_width: float, accept, points: int = ZOOM_POINTS,
            levels: int = ZOOM_LEVELS) -> tuple[float, float, float]:
    """Local maximum of ``field`` (vectorised over (M, 2) points) near (x0, y0) by a zoom search: a patch of
    ZOOM_POINTS² points over ±half_width, then patches a third the size around the best point,
    ZOOM_LEVELS times; only points where ``accept(x, y)`` (vectorised) count. Returns (value, x, y)."""
    best = (float(field(np.array([[x0, y0]]))[0]), x0, y0)
    half = half_width
    offsets = np.linspace(-1.0, 1.0, points)
    for _ in range(levels):
        gx, gy = np.meshgrid(best[1] + half * offsets, best[2] + half * offsets)
        px, py = gx.ravel(), gy.ravel()
        ok = accept(px, py)
        if ok.any():
            values = field(np.column_stack([px[ok], py[ok]]))
            k = int(np.argmax(values))
            if values[k] > best[0]:
                best = (float(values[k]), float(px[ok][k]), float(py[ok][k]))
        half /= (points - 1) / 2
    return best


def surface_fields(segments: Segments, currents: np.ndarray, gpr: float, kernel: SoilKernel,
                   surface: SurfaceMap, probes: tuple[tuple[float, float], ...] = (),
                   options: AssemblyOptions = AssemblyOptions(),
                   progress: Progress | None = None, zoning: Zoning | None = None,
                   metal: tuple[SeparateMetal, ...] = (), check_map: bool = True,
                   main_metal=None) -> SurfaceResult:
    """Map the surface and find the worst touch, step and mesh voltages, zone by zone.

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
    zoning : Zoning, optional
        Surface zones; default one zone covering everything.
    metal : sequence of SeparateMetal
        Separate electrodes whose touch voltages |V_metal − V_surface| within ``surface.touch_reach``
        are wanted.
    check_map : bool
        Also search every zone's worst touch, step and mesh voltage on a map of twice the spacing
        (``Extreme.map_check``).
    main_metal : callable, optional
        Conductors with impedance: the (complex) potential of the main system's metal nearest to each of
        (M, 2) points, per volt of ``gpr``; the currents are then phasors and every voltage is the magnitude
        of a phasor difference (touch |V_metal − V_surface|, step |V(a) − V(b)|). None: one equipotential
        system at ``gpr``.
    """
    zoning = zoning or Zoning()
    x, y = map_axes(segments, surface)
    X, Y = np.meshgrid(x, y)
    pts = np.column_stack([X.ravel(), Y.ravel()])
    potential = SurfacePotential(segments, currents, kernel, options)
    V = potential(pts, progress).reshape(X.shape)
    labels = zoning.label(X, Y)

    def touch_at(xy, v=None):
        v = potential(xy) if v is None else v
        return gpr - v if main_metal is None else np.abs(gpr * main_metal(xy) - v)

    area, meshes = touch_region(segments, surface)
    shapely.prepare(area)
    in_area = shapely.contains_xy(area, X, Y) | shapely.intersects_xy(area.boundary, X, Y)
    touch_map = touch_at(pts, V.ravel()).reshape(X.shape)
    touch = np.where(in_area, touch_map, np.nan)
    in_mesh = shapely.contains_xy(meshes, X, Y) if not meshes.is_empty else np.zeros_like(in_area)
    grid = (X, Y, surface.resolution)

    # the same searches on every other map point (twice the spacing) measure what the map spacing hides
    coarse = np.zeros(X.shape, bool)
    coarse[::2, ::2] = True
    grid2 = (X, Y, 2 * surface.resolution)

    def worst_main(region, mask, k):
        best = _worst_place(touch_at, touch_map, mask & (labels == k), grid, region, zoning, k)
        if best is not None and check_map:
            check = _worst_place(touch_at, touch_map, mask & (labels == k) & coarse, grid2, region, zoning, k)
            best = replace(best, map_check=None if check is None else check.value)
        return best

    zone_touch = [worst_main(area, in_area, k) for k in range(len(zoning))]
    zone_mesh = [worst_main(meshes, in_mesh, k) if in_mesh.any() else None for k in range(len(zoning))]
    step, zone_step = _step_voltages(x, y, V, surface.step_distance, potential, zoning, labels,
                                     coarse if check_map else None)
    zones = tuple(ZoneExtremes(t, st, m) for t, st, m in zip(zone_touch, zone_step, zone_mesh))
    max_touch = _largest(zone_touch)
    if max_touch is None:                                  # no touch area at all: nothing to report
        max_touch = Extreme(float("nan"), float(x[0]), float(y[0]))
    metal_touch = tuple(_metal_touch(m, segments, surface, potential, V, labels, grid, zoning) for m in metal)
    probe_xy = np.array(probes, float).reshape(-1, 2)
    probe_complex = potential(probe_xy) if probes else np.zeros(0)
    probe_v = np.abs(probe_complex)
    probe_touch = touch_at(probe_xy, probe_complex) if (probes and main_metal is not None) else None
    (x0, y0), (x1, y1) = surface.profile or ((x[0], y[0]), (x[-1], y[-1]))
    f = np.linspace(0.0, 1.0, PROFILE_POINTS)
    px, py = x0 + f * (x1 - x0), y0 + f * (y1 - y0)
    profile = Profile(f * np.hypot(x1 - x0, y1 - y0), px, py, np.abs(potential(np.column_stack([px, py]))))
    return SurfaceResult(x, y, np.abs(V), touch, step, area, meshes, max_touch, _largest(zone_step), _largest(zone_mesh),
                         probe_v, profile, zones, metal_touch, labels, probe_touch)


def _distinct(points, resolution: float) -> list[tuple[float, float]]:
    """The points in order, leaving out any within 1.5 map spacings of one already kept (a zoom search from
    it would find the same peak)."""
    kept: list[tuple[float, float]] = []
    for p in points:
        p = (float(p[0]), float(p[1]))
        if all(math.hypot(p[0] - q[0], p[1] - q[1]) > 1.5 * resolution for q in kept):
            kept.append(p)
    return kept


def _largest(extremes) -> Extreme | None:
    """The largest of some extremes (None entries skipped), ties broken by position."""
    best = None
    for e in extremes:
        if e is not None and (best is None or _better(e.value, e.x, e.y, best)):
            best = e
    return best


def _worst_place(field, values, mask, grid, region, zoning: Zoning, k: int) -> Extreme | None:
    """Largest value over the map points in ``mask`` (zone k of ``region``), refined by a local search on
    the exact ``field`` (vectorised over (M, 2) points). A zone part of the region with area but no map point is
    evaluated at points inside it, so that a criterion is never passed without evidence. None when
    zone k holds no part of the region."""
    X, Y, resolution = grid
    part = zoning.part(region, k)
    candidates_xy = []
    if mask.any():
        flat = np.where(mask, values, -np.inf).ravel()
        for c in _top_candidates(flat, X, Y):
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
    for cx, cy in _distinct([candidates_xy[i] for i in order], resolution):
        v, px, py = _refine(field, cx, cy, resolution, accept)
        if best is None or _better(v, px, py, best):
            best = Extreme(v, px, py)
    return best


def _metal_touch(m: SeparateMetal, segments: Segments, surface: SurfaceMap, potential, V, labels, grid,
                 zoning: Zoning) -> MetalTouch:
    """Touch voltages within reach of one separate electrode, per zone."""
    X, Y, resolution = grid
    _, reach = metal_footprint(segments, m.mask, max(surface.touch_reach, 1e-3))
    shapely.prepare(reach)
    near = shapely.intersects_xy(reach, X, Y)
    values = np.abs(m.potential - V)
    touch = tuple(_worst_place(lambda xy: np.abs(m.potential - potential(xy)), values, near & (labels == k), grid,
                               reach, zoning, k) for k in range(len(zoning)))
    return MetalTouch(touch)


def contour_lines(x: np.ndarray, y: np.ndarray, values: np.ndarray, levels) -> list[list[np.ndarray]]:
    """Contour polylines of a map at the given levels: per level, a list of (n, 2) arrays of x, y in m."""
    import contourpy

    gen = contourpy.contour_generator(x, y, values, line_type=contourpy.LineType.Separate)
    return [[np.asarray(line, float) for line in gen.lines(level)] for level in levels]


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


def _step_voltages(x, y, V, step_len, potential: SurfacePotential, zoning: Zoning, labels: np.ndarray,
                   coarse: np.ndarray | None = None):
    """Step-voltage map from a bicubic spline of the potential, and the worst step per zone checked
    exactly and refined, and again from the ``coarse`` map points when given (``Extreme.map_check``). A step
    belongs to the zone of the foot with the more severe zone."""
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
    # exact check around the best few map points of each zone: both ends of the step evaluated directly
    out = []
    for k in range(nz):
        if nz > 1 and not ((labels == k).any() or (per_zone[k] > 0).any()):
            out.append(None)
            continue
        best = _exact_step(per_zone[k], X, Y, step_len, potential, zoning, k, resolution, smooth)
        if best is not None and coarse is not None:
            check = _exact_step(np.where(coarse, per_zone[k], 0.0), X, Y, step_len, potential, zoning, k,
                                2 * resolution, smooth)
            best = replace(best, map_check=None if check is None else check.value)
        out.append(best)
    return step, out


#: Directions of the exact step check (half circle, each both ways), and of the zoom search for it.
EXACT_STEP_DIRECTIONS = 64
REFINE_STEP_DIRECTIONS = 12
#: Candidates within this share of the best exact value are refined.
REFINE_SHARE = 0.1


def steps_at(potential, xy: np.ndarray, step_len: float, zoning: "Zoning | None" = None, k: int = 0,
             directions: int = EXACT_STEP_DIRECTIONS) -> np.ndarray:
    """Largest potential difference (V) between each point and the points one step away, over
    2·``directions`` directions. ``potential`` is any vectorised function of (M, 2) points (the exact
    potential, or a spline of the map for a cheap search). With ``zoning``, only steps that belong to
    zone k (the zone of the more severe foot) count (−inf where none does). ``xy`` has shape (M, 2)."""
    xy = np.atleast_2d(np.asarray(xy, float))
    ang = np.pi * np.arange(directions) / directions
    d = step_len * np.concatenate([np.column_stack([np.cos(ang), np.sin(ang)]),
                                   -np.column_stack([np.cos(ang), np.sin(ang)])])
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


def _exact_step(values, X, Y, step_len, potential, zoning: Zoning, k: int, resolution: float,
                smooth=None) -> Extreme | None:
    """The best few map points of ``values`` checked exactly (both feet evaluated directly); those within
    REFINE_SHARE of the best refined by a zoom search of the step voltage on ``smooth`` (a bicubic spline of
    the map; the exact potential when None), and the point found evaluated exactly in the full set of
    directions (kept only if it beats the map point)."""
    search = potential if smooth is None else smooth
    cand = [c for c in _top_candidates(values, X, Y) if values.ravel()[c] > -np.inf]
    if not cand:
        return None
    xy = np.column_stack([X.ravel()[cand], Y.ravel()[cand]])
    first = steps_at(potential, xy, step_len, zoning, k)
    if not np.isfinite(first).any():
        return None
    best = None
    start = {(float(p[0]), float(p[1])): float(v0) for p, v0 in zip(xy, first)}
    for px, py in _distinct([p for p, v0 in start.items() if v0 >= (1 - REFINE_SHARE) * np.max(first)], resolution):
        v0 = start[(px, py)]
        _, qx, qy = _refine(lambda p: steps_at(search, p, step_len, zoning, k, REFINE_STEP_DIRECTIONS),
                            float(px), float(py), 0.5 * resolution, lambda x, y: np.ones(np.shape(x), bool),
                            points=5, levels=5)
        v = float(steps_at(potential, np.array([[qx, qy]]), step_len, zoning, k)[0])
        if v < v0:                                          # the coarse-direction search may mislead
            v, qx, qy = float(v0), float(px), float(py)
        if np.isfinite(v) and (best is None or _better(v, qx, qy, best)):
            best = Extreme(v, qx, qy)
    return best
