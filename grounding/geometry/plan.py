"""Plan view of the electrodes: map axes, the metal's footprint, the touch area and words for where a surface point lies."""

from __future__ import annotations

import numpy as np
import shapely
from shapely.geometry import LineString, MultiLineString, MultiPoint, Polygon
from shapely.ops import polygonize, unary_union

from ..case.model import SurfaceMap
from ..case.site import shapely_polygon
from .segments import Segments


def _noded_meshes(segments: Segments, mask: np.ndarray) -> tuple[shapely.Geometry | None, shapely.Geometry]:
    """The horizontal conductors selected by ``mask`` noded at their crossings, and the meshes they close."""
    c = segments.conductors
    horizontal = ~c.is_rod & mask
    lines = [LineString([tuple(c.start[k, :2]), tuple(c.end[k, :2])]) for k in np.flatnonzero(horizontal)
             if np.linalg.norm(c.start[k, :2] - c.end[k, :2]) > 1e-6]
    noded = unary_union(MultiLineString(lines)) if lines else None
    meshes = unary_union(list(polygonize(noded))) if noded is not None else Polygon()
    return noded, meshes


def metal_footprint(segments: Segments, mask: np.ndarray, reach: float,
                    inside: shapely.Geometry | None = None,
                    noded_meshes: tuple | None = None) -> tuple[shapely.Geometry, shapely.Geometry]:
    """Plan view of the conductors selected by ``mask``: (meshes they form, everything within ``reach``
    of them), shapely geometries in the x–y plane (m).

    ``inside``: an area the caller adds to the result anyway (e.g. the grid's meshes of the touch area). The
    second geometry is then (everything within ``reach``) ∪ ``inside``, computed without buffering the
    conductors whose band lies in ``inside`` (covered by it and at least ``reach`` from its edge: a point of the
    band outside would put the edge closer), the same set at a fraction of the cost on large grids.
    ``noded_meshes``: :func:`_noded_meshes` of the same ``mask``, when the caller has it."""
    c = segments.conductors
    noded, meshes = noded_meshes or _noded_meshes(segments, mask)
    if reach <= 0 and inside is None:                # the meshes alone were asked for
        return meshes, Polygon()
    parts = []
    if noded is not None and inside is not None and not inside.is_empty:
        pieces = np.array(list(getattr(noded, "geoms", [noded])), dtype=object)
        shapely.prepare(inside)
        edge = inside.boundary
        shapely.prepare(edge)
        pieces = pieces[~shapely.covers(inside, pieces) | shapely.dwithin(pieces, edge, reach)]
        if len(pieces):
            parts.append(MultiLineString(list(pieces)).buffer(reach))
        parts.append(inside)
    elif noded is not None:
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
    noded = _noded_meshes(segments, block)
    meshes = noded[1]
    if not surface.touch_areas:
        _, reach = metal_footprint(segments, main, surface.touch_reach, inside=meshes,
                                   noded_meshes=noded if np.array_equal(block, main) else None)
        return unary_union([meshes, reach]), meshes
    parts = []
    for t in surface.touch_areas:
        if t.area is not None:
            parts.append(shapely_polygon(t.area))
        else:
            sel = main & (c.matching(t.metal) if t.metal else True)
            parts.extend(metal_footprint(segments, sel, t.reach))
    return unary_union(parts), meshes


def _map_extent(segments: Segments, surface: SurfaceMap) -> tuple[np.ndarray, np.ndarray]:
    pts = np.vstack([segments.start[:, :2], segments.end[:, :2]])
    lo = pts.min(axis=0) - surface.margin
    hi = pts.max(axis=0) + surface.margin
    for t in surface.touch_areas:
        if t.area is not None:
            ta = np.array(t.area.shell)
            lo, hi = np.minimum(lo, ta.min(axis=0)), np.maximum(hi, ta.max(axis=0))
    return lo, hi


def map_size(segments: Segments, surface: SurfaceMap) -> tuple[float, float]:
    """Points of the map along x and y (as floats: counted without building the axes, so that an absurd
    resolution is refused before anything is allocated)."""
    lo, hi = _map_extent(segments, surface)
    n = np.maximum(2.0, np.ceil((hi - lo) / surface.resolution - 1e-9) + 1)
    return float(n[0]), float(n[1])


def map_axes(segments: Segments, surface: SurfaceMap) -> tuple[np.ndarray, np.ndarray]:
    """Map axes covering the electrode footprint plus the margin, m."""
    lo, hi = _map_extent(segments, surface)
    n = np.maximum(2, np.ceil((hi - lo) / surface.resolution - 1e-9).astype(int) + 1)
    return (lo[0] + surface.resolution * np.arange(n[0]), lo[1] + surface.resolution * np.arange(n[1]))
