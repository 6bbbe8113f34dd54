"""Surface stage: surface potential of known current distributions, touch, step and mesh voltages."""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from scipy.integrate import quad

from grounding.case.load import parse_case
from grounding.geometry.segments import segment
from grounding.kernels import make_kernel
from grounding.operators.potential import surface_potential
from grounding.study.pipeline import run_study
from tests.conftest import case_text

ROD = "rods: [{top: [0, 0, 0], length: 5, diameter: 0.016}]\n"


def rod_with_uniform_current(soil: str):
    case = parse_case(case_text(ROD, soil=soil, extra="discretization: {max_segment: 0.25}\n"))
    s = segment(case)
    current = 10.0 * s.length / s.length.sum()           # 10 A leaking uniformly
    return s, current, make_kernel(case.soil, 0.25)


def test_uniform_rod_surface_potential_closed_form():
    """Uniform line source from the surface to depth L in uniform soil (image coincides with the source
    at the surface): V(r) = ρ I/(2π L) asinh(L/r) (integral of ρ I dz/(2π L √(r² + z²))).

    Tolerance: beyond ``near_reach`` segment lengths the potential uses 2-point Gauss and, beyond
    ``mid_reach``, the midpoint rule, whose relative error per segment is below L²/(24 d²); summed
    over the rod that is about 1e-4 at these distances."""
    s, i, k = rod_with_uniform_current("{resistivity: 120}")
    r = np.array([0.2, 0.7, 2.0, 6.0, 20.0, 150.0])
    v = surface_potential(np.column_stack([r, np.zeros_like(r)]), s, i, k)
    expected = 120.0 * 10.0 / (2 * np.pi * 5.0) * np.arcsinh(5.0 / r)
    assert np.allclose(v, expected, rtol=2e-4)


def test_two_layer_rod_surface_potential_against_quadrature():
    """Same uniform source in two-layer soil, against scipy.integrate.quad of the image series along the rod."""
    soil = "{layers: [{resistivity: 300, thickness: 2}, {resistivity: 50}]}"
    s, i, k = rod_with_uniform_current(soil)
    for r in (0.3, 1.5, 8.0, 40.0):
        ref = quad(lambda z: k.series(np.array([r]), 0.0, z)[0], 0, 5, points=[2.0], epsrel=1e-10)[0] * 10.0 / 5.0
        v = surface_potential(np.array([[r, 0.0]]), s, i, k)[0]
        assert v == pytest.approx(ref, rel=2e-4)   # same quadrature tiers as above


GRID_CASE = """\
format: 1
soil: {resistivity: 200}
surface_layer: {resistivity: 2000, thickness: 0.1}
fault: {current: 5000, split_factor: 0.5, clearing_time: 0.5}
electrodes:
  grids: [{origin: [0, 0], size: [20, 20], meshes: [2, 2], depth: 0.5, diameter: 0.01}]
surface: {margin: 3, resolution: 0.5}
probes: [[5, 5], [15, 15], [60, 60]]
"""


@pytest.fixture(scope="module")
def grid_result():
    return run_study(parse_case(GRID_CASE), estimate_error=False)


def test_far_surface_potential_is_point_source(grid_result):
    """Far away the grid looks like a point source at the surface: V = ρ IG/(2π r)."""
    r = grid_result
    far = surface_potential(np.array([[10.0 + 2000.0, 10.0]]), r.segments, r.segment_currents, r.kernel)[0]
    assert far == pytest.approx(200.0 * r.grid_current / (2 * np.pi * 2000.0), rel=1e-3)


def test_currents_add_up_to_grid_current(grid_result):
    assert grid_result.segment_currents.sum() == pytest.approx(grid_result.grid_current, rel=1e-12)


def test_max_touch_is_at_least_every_mapped_value(grid_result):
    s = grid_result.surface
    assert s.max_touch.value >= np.nanmax(s.touch) - 1e-9
    assert shapely.covers(s.touch_area, shapely.Point(s.max_touch.x, s.max_touch.y))
    # the worst touch voltage of a plain square grid is near a corner mesh (well-known behaviour)
    assert min(np.hypot(s.max_touch.x - cx, s.max_touch.y - cy) for cx in (0, 20) for cy in (0, 20)) < 8


def test_mesh_voltage_is_inside_meshes_and_below_touch(grid_result):
    s = grid_result.surface
    assert s.max_mesh is not None
    assert shapely.contains(s.meshes, shapely.Point(s.max_mesh.x, s.max_mesh.y))
    assert s.max_mesh.value <= s.max_touch.value + 1e-9


def test_symmetric_grid_gives_symmetric_potential(grid_result):
    s = grid_result.surface
    V = s.potential
    assert np.allclose(V, V[:, ::-1], rtol=1e-6)
    assert np.allclose(V, V.T, rtol=1e-6)


def test_step_voltage_checked_exactly(grid_result):
    """The reported step voltage is evaluated directly at both feet and refined between map points: it is
    at least the spline map's largest value (less the map's interpolation error) and the largest there."""
    s = grid_result.surface
    assert s.max_step.value >= np.max(s.step) * (1 - 0.03)
    assert s.max_step.value <= np.max(s.step) * 1.10
    r = grid_result
    x, y = s.max_step.x, s.max_step.y
    ang = np.linspace(0, 2 * np.pi, 73)
    ends = np.column_stack([x + np.cos(ang), y + np.sin(ang)])
    v0 = surface_potential(np.array([[x, y]]), r.segments, r.segment_currents, r.kernel)[0]
    v = surface_potential(ends, r.segments, r.segment_currents, r.kernel)
    assert np.abs(v - v0).max() <= s.max_step.value * (1 + 1e-9)


def test_probe_touch_voltage(grid_result):
    r = grid_result
    t = r.probe_touch_voltages()
    assert t[0] == pytest.approx(t[1], rel=1e-6)          # symmetric mesh centres
    assert t[2] > t[0]                                    # far outside: almost the whole GPR
    # 70.7 m from the grid centre the grid acts as a point source at the surface: V = ρ IG / (2π d)
    d = np.hypot(50.0, 50.0)
    assert r.surface.probe_potential[2] == pytest.approx(200.0 * r.grid_current / (2 * np.pi * d), rel=0.02)


def test_touch_peak_on_the_edge_of_the_touch_area_is_found_on_a_coarse_map():
    """Regression: with a 2 m map and the default 1 m reach, no map point lies in the band outside the
    grid; the worst touch voltage is 1 m diagonally outside a corner (the surface potential falls away from
    the metal fastest there) and must be found (an earlier line search reported 745 V where 1379 V occur)."""
    from grounding.case.load import parse_case
    from grounding.operators.potential import surface_potential
    from grounding.study.pipeline import run_study
    from tests.conftest import case_text

    case = parse_case(case_text("""\
        grids: [{origin: [0, 0], size: [20, 16], meshes: [4, 4], depth: 0.5, diameter: 0.01}]
        """, soil="{resistivity: 150}", fault="{current: 2500, split_factor: 0.5, clearing_time: 0.3}",
        extra="discretization: {max_segment: 2.0}\nsurface: {margin: 2, resolution: 2.0}\n"))
    r = run_study(case, estimate_error=False)
    corner = np.array([[20 + 0.5 ** 0.5, -0.5 ** 0.5], [-0.5 ** 0.5, -0.5 ** 0.5]])
    edge_touch = r.ground_potential_rise - surface_potential(corner, r.segments, r.segment_currents, r.kernel)
    assert r.touch_check.worst.value >= edge_touch.max() * (1 - 1e-9)


def test_touch_area_shortcut_equals_buffering_every_conductor(make_case):
    """touch_region buffers only the conductors near the meshes' edge (or outside them); the area equals the
    meshes ∪ the band around every conductor (shapely as the independent reference), to buffer-rounding size."""
    from shapely.ops import unary_union

    from grounding.geometry.plan import metal_footprint, touch_region
    from grounding.geometry.segments import segment
    case = make_case("""
        grids: [{origin: [0, 0], size: [30, 20], meshes: [6, 4], depth: 0.5, diameter: 0.01},
                {origin: [30, 5], size: [2, 2], meshes: [4, 4], depth: 0.5, diameter: 0.01}]
        conductors: [{start: [30, 10, 0.5], end: [40, 10, 0.5], diameter: 0.01}]
        rods: [{top: [40, 10, 0.5], length: 3, diameter: 0.016}]
        """)
    segments = segment(case)
    area, meshes = touch_region(segments, case.surface)
    main = segments.conductors.group == 0
    full_meshes, band = metal_footprint(segments, main, case.surface.touch_reach)   # every conductor buffered
    reference = unary_union([meshes, band])
    assert area.symmetric_difference(reference).area < 1e-6 * reference.area


STEP_EDGE_CASE = """\
format: 1
title: step beyond the edge
soil: {resistivity: 100}
surface_layer: {resistivity: 3000, thickness: 0.1}
fault: {current: 3000, split_factor: 0.6, x_over_r: 10, clearing_time: 0.5}
electrodes:
  grids: [{origin: [0, 0], size: [20, 20], meshes: [4, 4], depth: 0.5, diameter: 0.0124}]
surface: {margin: %s, resolution: %s}
"""


@pytest.mark.parametrize("margin, resolution", [(3, 0.5), (3, 1.0), (3, 4.0), (0, 0.5)])
def test_worst_step_is_found_whatever_the_map(margin, resolution):
    """The largest step voltage of a square grid lies just outside a corner (IEEE Std 80-2013 §16.5.2 takes the
    step just outside the perimeter conductor; clause recalled from memory). Reference: an exhaustive search, the
    exact step (64 directions, both ways) at every point of a 0.1 m lattice over a 2 m square at the corner (the
    grid is symmetric, so every corner gives the same). Before the search along the rings outside the metal a
    4 m map reported 284 V and a map ending at the grid 270 V, where 704 V occur."""
    from grounding.operators.potential import SurfacePotential
    from grounding.surface.steps import steps_at
    r = run_study(parse_case(STEP_EDGE_CASE % (margin, resolution)), estimate_error=False, uncertainty=False)
    potential = SurfacePotential(r.segments, r.segment_currents, r.kernel)
    g = np.arange(-1.5, 0.5 + 1e-9, 0.1)
    lattice = np.column_stack([a.ravel() for a in np.meshgrid(g, g)])
    exhaustive = float(steps_at(potential, lattice, 1.0).max())
    assert 650 < exhaustive < 750                                   # the case's own scale (about 704 V)
    assert r.step_check.worst.value == pytest.approx(exhaustive, rel=2e-3)
    assert r.step_check.worst.value <= exhaustive * (1 + 2e-3)
