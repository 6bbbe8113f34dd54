"""IEEE Std 80 worked example (Annex B, square grid without rods), reproduced by the safety stage.

Values recalled from memory (IEEE Std 80-2013, Annex B, example 1): 70 m × 70 m grid of 7 m meshes,
h = 0.5 m, d = 0.01 m, ρ = 400 Ω·m, crushed rock ρs = 2500 Ω·m of 0.102 m, ts = tf = 0.5 s,
3I0 = 3180 A, Sf = 0.6, Df = 1 → IG = 1908 A; Cs ≈ 0.74; E_touch70 = 838.2 V; E_step70 = 2686.6 V;
Rg = 2.78 Ω (Sverak); Em ≈ 1002.6 V; n = 11. Our own hand calculation from the equations agrees.
The example rounds Cs to 0.74 before computing the limits; unrounded Cs gives E_touch70 ≈ 840.5 V.
"""

from __future__ import annotations

import pytest

from grounding.case.load import parse_case
from grounding.safety.ieee80 import (
    decrement_factor,
    surface_layer_factor,
    tolerable_step_voltage,
    tolerable_touch_voltage,
)
from grounding.safety.simplified import mesh_and_step, simplified_method, sverak_resistance

CASE = """\
format: 1
soil: {resistivity: 400}
surface_layer: {resistivity: 2500, thickness: 0.102}
fault: {current: 3180, split_factor: 0.6, clearing_time: 0.5}
criteria: {body_weight: 70}
electrodes:
  grids: [{origin: [0, 0], size: [70, 70], meshes: [10, 10], depth: 0.5, diameter: 0.01}]
"""


def test_surface_layer_factor():
    assert surface_layer_factor(400, 2500, 0.102) == pytest.approx(0.74, abs=0.005)


def test_tolerable_voltages_with_rounded_cs():
    assert tolerable_touch_voltage(0.74, 2500, 0.5, 70) == pytest.approx(838.2, abs=0.1)
    assert tolerable_step_voltage(0.74, 2500, 0.5, 70) == pytest.approx(2686.6, abs=0.1)


def test_tolerable_touch_with_unrounded_cs():
    cs = surface_layer_factor(400, 2500, 0.102)
    assert tolerable_touch_voltage(cs, 2500, 0.5, 70) == pytest.approx(840.5, abs=0.1)


def test_sverak_resistance():
    assert sverak_resistance(400, 1540, 4900, 0.5) == pytest.approx(2.78, abs=0.005)


def test_mesh_voltage_and_factors():
    f = mesh_and_step(400, 1908, 70, 70, 10, 10, 0.5, 0.01, [], False)
    assert f["n"] == pytest.approx(11)
    assert f["LC"] == pytest.approx(1540)
    assert f["Em"] == pytest.approx(1002.6, rel=0.002)


def test_simplified_method_from_case_file():
    case = parse_case(CASE)
    ig = decrement_factor(None, 50, 0.5) * 0.6 * 3180
    assert ig == pytest.approx(1908)
    res = simplified_method(case, ig)
    assert res.applicable
    assert res.grid_resistance == pytest.approx(2.78, abs=0.005)
    assert res.mesh_voltage == pytest.approx(1002.6, rel=0.002)


def test_simplified_method_refuses_layered_soil():
    case = parse_case(CASE.replace("soil: {resistivity: 400}",
                                   "soil: {layers: [{resistivity: 400, thickness: 3}, {resistivity: 100}]}"))
    res = simplified_method(case, 1908)
    assert not res.applicable and "uniform soil" in res.reason


def test_numerical_results_near_the_simplified_method():
    """Cross-check of the whole pipeline on the Annex B grid. The simplified method's equations are
    fits to computer analyses of such grids, so the method of moments should land within about ten
    per cent of them (common practice, not a published tolerance). Measured here: Rg −4.7 %, mesh
    voltage −3.4 %, step voltage −6.9 %."""
    from grounding.study.pipeline import run_study

    r = run_study(parse_case(CASE + "surface: {margin: 3, resolution: 0.5}\n"), estimate_error=False)
    simp = r.simplified
    assert r.grid_resistance == pytest.approx(simp.grid_resistance, rel=0.08)
    assert r.surface.max_mesh.value == pytest.approx(simp.mesh_voltage, rel=0.10)
    assert r.surface.max_step.value == pytest.approx(simp.step_voltage, rel=0.15)
    # the worst mesh voltage sits in a corner mesh (IEEE Std 80, clause 16.5: Em is the corner-mesh voltage)
    assert min(r.surface.max_mesh.x, 70 - r.surface.max_mesh.x) < 7
    assert min(r.surface.max_mesh.y, 70 - r.surface.max_mesh.y) < 7
