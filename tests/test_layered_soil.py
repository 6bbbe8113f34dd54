"""N-layer kernel (Hankel transform) against the two-layer image series, the uniform closed form and
the surface-source resistivity transform used for soundings (Koefoed 1979)."""

from __future__ import annotations

import numpy as np
import pytest

from grounding.kernels import LayeredSoil, TwoLayerSoil, UniformSoil
from grounding.sounding.forward import point_source_kernel
from tests.helpers import resistance

R = np.array([0.05, 0.5, 2.0, 7.0, 30.0, 200.0, 3000.0])
PAIRS = [(0.6, 0.6), (0.6, 2.0), (3.0, 1.0), (6.0, 0.6), (0.6, 6.0), (6.0, 8.0), (3.9, 4.1)]


@pytest.mark.parametrize("z,zp", PAIRS)
def test_two_layers_match_image_series(z, zp):
    """Image series of Sunde (1949) / Tagg (1964), itself checked against a direct Hankel quadrature."""
    two = TwoLayerSoil(300.0, 60.0, 4.0, tolerance=1e-10)
    lay = LayeredSoil([300.0, 60.0], [4.0])
    assert np.allclose(lay.radial(z, zp)(R), two.series(R, z, zp), rtol=1e-5)


def test_three_layers_with_equal_lower_layers_collapse_to_two():
    lay = LayeredSoil([300.0, 60.0, 60.0], [4.0, 3.0])
    two = TwoLayerSoil(300.0, 60.0, 4.0, tolerance=1e-10)
    for z, zp in [(0.6, 0.6), (0.6, 5.0), (5.0, 8.0), (9.0, 0.6)]:
        assert np.allclose(lay.radial(z, zp)(R), two.series(R, z, zp), rtol=1e-5)


def test_all_layers_equal_collapse_to_uniform():
    lay = LayeredSoil([120.0, 120.0, 120.0], [1.0, 2.0])
    uni = UniformSoil(120.0)
    for z, zp in [(0.5, 0.5), (0.5, 2.5), (4.0, 1.5)]:
        assert np.allclose(lay.radial(z, zp)(R), uni.radial(z, zp)(R), rtol=1e-5)   # table accuracy


def test_surface_source_matches_resistivity_transform():
    """A source just below the surface seen at the surface: G = F(r)/(2π), F the Hankel transform of the
    resistivity transform T1 (Koefoed 1979), computed by an independent recursion."""
    rho, h = [500.0, 40.0, 900.0], [1.5, 6.0]
    lay = LayeredSoil(rho, h)
    r = np.array([0.5, 3.0, 15.0, 80.0, 600.0])
    assert np.allclose(lay.radial(0.0, 1e-6)(r), point_source_kernel(r, rho, h) / (2 * np.pi), rtol=1e-4)


def test_remainder_table_matches_direct_quadrature():
    lay = LayeredSoil([500.0, 40.0, 900.0], [1.5, 6.0])
    r = np.array([0.0, 0.2, 1.0, 3.0])
    for z, zp in [(0.6, 0.6), (0.6, 4.0), (8.0, 5.0)]:
        assert np.allclose(lay.remainder(r, z, zp), lay.remainder_exact(r, z, zp), rtol=1e-5, atol=1e-9)


def test_interface_continuity():
    lay = LayeredSoil([500.0, 40.0, 900.0], [1.5, 6.0])
    r = np.array([0.7, 4.0, 20.0])
    for d in (1.5, 7.5):
        eps = 1e-7
        assert np.allclose(lay.radial(d - eps, 3.0)(r), lay.radial(d + eps, 3.0)(r), rtol=1e-5)


GRID = ("grids: [{origin: [0, 0], size: [30, 20], meshes: [3, 2], depth: 0.6, diameter: 0.012}]\n"
        "rods: [{top: [0, 0, 0.6], length: 6, diameter: 0.016}, {top: [30, 20, 0.6], length: 6, diameter: 0.016}]\n")


def test_grid_resistance_three_layer_collapses_to_two_layer_solver():
    two = resistance(GRID, 1.0, soil="{layers: [{resistivity: 300, thickness: 2.6}, {resistivity: 60}]}")
    three = resistance(GRID, 1.0, soil="{layers: [{resistivity: 300, thickness: 2.6}, {resistivity: 60, "
                                       "thickness: 2.0}, {resistivity: 60}]}")
    # the 3-layer model also cuts the rods at the (inactive) second interface at 4.6 m, which is a node
    # of the 1 m segmentation, so both have the same segments
    assert three == pytest.approx(two, rel=2e-5)


def test_grid_resistance_three_layers_between_bounds():
    three = resistance(GRID, 1.0, soil="{layers: [{resistivity: 300, thickness: 2.6}, {resistivity: 60, "
                                       "thickness: 2.0}, {resistivity: 600}]}")
    upper = resistance(GRID, 1.0, soil="{layers: [{resistivity: 300, thickness: 2.6}, {resistivity: 600}]}")
    lower = resistance(GRID, 1.0, soil="{layers: [{resistivity: 300, thickness: 2.6}, {resistivity: 60}]}")
    assert lower < three < upper


SLOPED = "conductors:\n" + "".join(
    f"  - {{start: [{2 * i}, 0, 0.5], end: [{2 * i}, 12, {0.5 + 0.15 * i}], diameter: 0.01}}\n" for i in range(1, 9)) + \
    "  - {start: [0, 0, 0.5], end: [18, 0, 0.5], diameter: 0.01}\n"


def test_many_depths_direct_sums_match_tables():
    """Sloping conductors give hundreds of distinct depths; the kernels then sum their terms directly (1 000
    random pairs: the table reference builds one radial table per depth pair, about 2 s)."""
    rng = np.random.default_rng(0)
    r, z, zp = rng.uniform(0.1, 40, 1000), rng.uniform(0.3, 6, 1000), rng.uniform(0.3, 6, 1000)
    two = TwoLayerSoil(300.0, 60.0, 2.0)
    assert two._go_direct(r, z, zp)
    tables = two._by_depth(two.radial, r, z, zp)
    assert np.allclose(two.potential(r, z, zp), tables, rtol=2e-5)
    assert np.allclose(two.remainder(r, z, zp), two._by_depth(two.remainder_radial, r, z, zp), rtol=2e-5,
                       atol=1e-9)


def test_sloping_conductors_three_layers_collapse_to_two_layer_solver():
    """The 3-layer kernel's many-depth path (remainder interpolated between depth nodes 1/30 of the
    thinnest layer apart) against the image series; measured 1.4e-4, within the interpolation's
    design accuracy and far below the discretisation error."""
    two = resistance(SLOPED, 0.5, soil="{layers: [{resistivity: 300, thickness: 1.0}, {resistivity: 60}]}")
    three = resistance(SLOPED, 0.5, soil="{layers: [{resistivity: 300, thickness: 1.0}, {resistivity: 60, "
                                         "thickness: 30}, {resistivity: 60}]}")
    assert three == pytest.approx(two, rel=3e-4)


def test_high_contrast_two_layer_uses_the_hankel_kernel_with_bounded_memory():
    """Rock under thin soil (K → 1): the image series would need ~10^5 orders (an 18 GiB table was seen);
    the Hankel-transform kernel takes over above MAX_IMAGE_ORDERS, and agrees with the series where both run
    (K = 0.977: the image series of Sunde/Tagg against the Hankel transform, the same physics two ways)."""
    from grounding.case.load import parse_case
    from grounding.geometry.segments import segment
    from grounding.kernels import LayeredSoil, TwoLayerSoil, make_kernel
    from grounding.operators.assembly import AssemblyOptions, assemble
    from grounding.solve.equipotential import solve_equipotential
    from tests.conftest import case_text

    grid = "grids: [{origin: [0, 0], size: [20, 20], meshes: [4, 4], depth: 0.5, diameter: 0.01}]\n"

    def rg(rho2, kernel=None):
        case = parse_case(case_text(grid, soil=f"{{layers: [{{resistivity: 10, thickness: 1.0}}, {{resistivity: {rho2}}}]}}"))
        s = segment(case)
        k = kernel or make_kernel(case.soil, 1.0)
        return solve_equipotential(assemble(s, k, AssemblyOptions())).resistance, k

    series, k1 = rg(850)
    hankel, _ = rg(850, LayeredSoil([10, 850], [1.0]))
    assert isinstance(k1, TwoLayerSoil)
    assert series == pytest.approx(hankel, rel=2e-5)
    r, k2 = rg(100000)
    assert isinstance(k2, LayeredSoil) and np.isfinite(r) and r > series


def test_grid_on_a_layer_interface_runs():
    """Regression: a grid lying exactly on an interface of a three-layer soil made the matrix indefinite
    (its image through the interface coincided with it). It is now taken one radius inside the more
    resistive layer, with a note, and Rg lies between those of the grid 10 mm above and below."""
    from grounding.case.load import parse_case
    from grounding.study.pipeline import run_study
    from tests.conftest import case_text

    soil = "{layers: [{resistivity: 100, thickness: 0.3}, {resistivity: 300, thickness: 0.2}, {resistivity: 50}]}"

    def study(depth):
        grid = (f"grids: [{{origin: [0, 0], size: [10, 10], meshes: [2, 2], depth: {depth}, diameter: 0.01}}]\n"
                f"rods: [{{top: [0, 0, {depth}], length: 2, diameter: 0.016}}]\n")
        return run_study(parse_case(case_text(grid, soil=soil, extra="surface: {resolution: 1.0}\n")),
                         estimate_error=False)

    on = study(0.5)
    assert any("lie(s) on the soil-layer interface at 0.5 m" in w for w in on.warnings)
    assert not any("do not touch" in w for w in on.warnings)
    above, below = study(0.49), study(0.51)
    assert below.grid_resistance < on.grid_resistance < above.grid_resistance
