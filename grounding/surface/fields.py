"""Surface fields: earth-surface potential from the leakage currents, touch, step and mesh voltages.

The potential at a surface point is Σ_j I_j/L_j ∫_j G ds', with the same three-tier treatment as
assembly (exact near terms, 2-point Gauss in the middle range, midpoints far away). Touch voltage is
GPR − surface potential over the touch area; step voltage the largest potential difference between
a point and the points one step away; mesh voltage the largest touch voltage inside grid meshes."""

from __future__ import annotations

from dataclasses import replace
from typing import Callable

import numpy as np
import shapely

from ..case.model import SurfaceMap
from ..geometry.plan import map_axes, metal_footprint, touch_region
from ..geometry.segments import Segments
from ..kernels.base import SoilKernel
from ..operators.assembly import AssemblyOptions
from ..operators.potential import SurfacePotential
from .results import Extreme, Profile, SeparateMetal, SurfaceResult, ZoneExtremes, largest
from .search import touch_near_metal, worst_place
from .steps import step_voltages
from .zoning import Zoning

Progress = Callable[[str, float], None]


#: Points along the potential profile.
PROFILE_POINTS = 301


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
    if progress:
        progress("search", 0.0)                      # the map is done: the worst points next

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
        best = worst_place(touch_at, touch_map, mask & (labels == k), grid, region, zoning, k)
        if best is not None and check_map:
            check = worst_place(touch_at, touch_map, mask & (labels == k) & coarse, grid2, region, zoning, k)
            best = replace(best, map_check=None if check is None else check.value)
        return best

    zone_touch = [worst_main(area, in_area, k) for k in range(len(zoning))]
    zone_mesh = [worst_main(meshes, in_mesh, k) if in_mesh.any() else None for k in range(len(zoning))]
    step, zone_step = step_voltages(x, y, V, surface.step_distance, potential, zoning, labels,
                                     coarse if check_map else None, step_rings(segments, surface, area, metal))
    zones = tuple(ZoneExtremes(t, st, m) for t, st, m in zip(zone_touch, zone_step, zone_mesh))
    max_touch = largest(zone_touch)
    if max_touch is None:                                  # no touch area at all: nothing to report
        max_touch = Extreme(float("nan"), float(x[0]), float(y[0]))
    metal_touch = tuple(touch_near_metal(m, segments, surface, potential, V, labels, grid, zoning) for m in metal)
    probe_xy = np.array(probes, float).reshape(-1, 2)
    probe_complex = potential(probe_xy) if probes else np.zeros(0)
    probe_v = np.abs(probe_complex)
    probe_touch = touch_at(probe_xy, probe_complex) if (probes and main_metal is not None) else None
    (x0, y0), (x1, y1) = surface.profile or ((x[0], y[0]), (x[-1], y[-1]))
    f = np.linspace(0.0, 1.0, PROFILE_POINTS)
    px, py = x0 + f * (x1 - x0), y0 + f * (y1 - y0)
    profile = Profile(f * np.hypot(x1 - x0, y1 - y0), px, py, np.abs(potential(np.column_stack([px, py]))))
    return SurfaceResult(x, y, np.abs(V), touch, step, area, meshes, max_touch, largest(zone_step), largest(zone_mesh),
                         probe_v, profile, zones, metal_touch, labels, probe_touch)


def step_rings(segments: Segments, surface: SurfaceMap, area: shapely.Geometry,
               metal: tuple[SeparateMetal, ...] = ()) -> shapely.Geometry:
    """Lines just outside the metal where step voltages peak: the outline of the main system's touch area
    (``area``: its meshes and everything within ``touch_reach``; with explicit ``touch_areas``, the main metal
    within ``touch_reach`` instead) and of every separate electrode's reach, m."""
    reach = max(surface.touch_reach, 0.5 * surface.step_distance)
    if surface.touch_areas or surface.touch_reach < 0.5 * surface.step_distance:
        _, area = metal_footprint(segments, segments.conductors.group == 0, reach)
    lines = [area.boundary] + [metal_footprint(segments, m.mask, reach)[1].boundary for m in metal]
    return shapely.union_all([g for g in lines if not g.is_empty])
