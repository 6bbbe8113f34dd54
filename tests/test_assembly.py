"""Assembly and solve: symmetry, positive definiteness, the tiered pair treatment, convergence."""

from __future__ import annotations

import numpy as np
import pytest

from grounding.case.load import parse_case
from grounding.geometry.segments import segment
from grounding.kernels import make_kernel
from grounding.operators.assembly import AssemblyOptions, assemble
from grounding.solve.equipotential import solve_equipotential
from tests.conftest import case_text
from tests.helpers import resistance

GRID = ("grids: [{origin: [0, 0], size: [30, 20], meshes: [3, 2], depth: 0.6, diameter: 0.012}]\n"
        "rods: [{top: [0, 0, 0.6], length: 4, diameter: 0.016}, {top: [30, 20, 0.6], length: 4, diameter: 0.016}]\n")
TWO_LAYER = "{layers: [{resistivity: 300, thickness: 2.5}, {resistivity: 60}]}"


def matrix(soil="{resistivity: 100}", seg=1.0, options=AssemblyOptions()):
    case = parse_case(case_text(GRID, soil=soil, extra=f"discretization: {{max_segment: {seg}}}\n"))
    s = segment(case)
    return assemble(s, make_kernel(case.soil, seg), options)


@pytest.mark.parametrize("soil", ["{resistivity: 100}", TWO_LAYER])
def test_matrix_symmetric_positive_definite(soil):
    R = matrix(soil)
    assert np.array_equal(R, R.T)
    assert np.linalg.eigvalsh(R).min() > 0


@pytest.mark.parametrize("soil", ["{resistivity: 100}", TWO_LAYER,
                                  "{layers: [{resistivity: 40, thickness: 0.3}, {resistivity: 400}]}",
                                  "{layers: [{resistivity: 300, thickness: 1.2}, {resistivity: 40, thickness: 2}, "
                                  "{resistivity: 900}]}"])
def test_tiers_agree_with_exact_everywhere(soil):
    """Treating every pair as near (exact near terms) must give the same Rg as the three tiers."""
    tiered = solve_equipotential(matrix(soil)).resistance
    exact = solve_equipotential(matrix(soil, options=AssemblyOptions(near_reach=1e6, mid_reach=2e6))).resistance
    assert tiered == pytest.approx(exact, rel=2e-4)


def test_halving_segments_changes_grid_resistance_under_one_percent():
    r1 = resistance(GRID, 2.0)
    r2 = resistance(GRID, 1.0)
    r3 = resistance(GRID, 0.5)
    assert abs(r2 - r1) / r2 < 0.01
    assert abs(r3 - r2) / r3 < 0.01
    assert abs(r3 - r2) < abs(r2 - r1)          # converging


def test_two_layer_with_equal_resistivities_equals_uniform():
    """Equal up to the radial tables' interpolation error (about 4e-6 per entry). The interface sits
    at a node of the rods' 1 m segmentation, so both models have the same segments."""
    uni = resistance(GRID, 1.0, soil="{resistivity: 150}")
    two = resistance(GRID, 1.0, soil="{layers: [{resistivity: 150, thickness: 2.6}, {resistivity: 150.0000001}]}")
    assert two == pytest.approx(uni, rel=1e-5)


def test_conductive_bottom_layer_lowers_resistance():
    top = resistance(GRID, 1.0, soil="{resistivity: 300}")
    two = resistance(GRID, 1.0, soil=TWO_LAYER)
    bottom = resistance(GRID, 1.0, soil="{resistivity: 60}")
    assert bottom < two < top


def test_rods_crossing_the_interface_converge():
    rods = "rods: [{top: [0, 0, 0.5], length: 6, diameter: 0.016}]\n"
    soil = "{layers: [{resistivity: 400, thickness: 2}, {resistivity: 40}]}"
    r = [resistance(rods, seg, soil=soil) for seg in (1.0, 0.5, 0.25)]
    assert abs(r[2] - r[1]) < abs(r[1] - r[0])
    assert abs(r[2] - r[1]) / r[2] < 0.01
