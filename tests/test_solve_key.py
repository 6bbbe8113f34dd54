"""Which case fields decide whether two study conditions can share one solve (``SolveKey``).

Every field of ``Case`` is listed here as inside the key (it changes the solved currents or the surface map
at 1 V of GPR) or outside (it only scales the fields or sets the limits, or is not used by the solve). A new
``Case`` field fails this test until someone decides which it is.
"""

from dataclasses import fields, replace

from grounding import load_case
from grounding.case.model import Case, Layer, SurfaceLayer
from grounding.study.conditions import SolveKey, solve_key

from .test_cli import ROOT

#: Case fields that enter the key (directly or through the named parts).
INSIDE = {"soil": "layers (uncertainty only feeds the propagation, which re-solves per parameter)",
          "electrodes": "grids, conductors, rods, material, conductor_impedance, conductor_temperature",
          "fault": "frequency and injection only (they matter for the coupled metal–soil solve)",
          "surface_zones": "areas and the rank of their severity, not the coverings",
          "separate_electrodes": "name, connection and parts",
          "discretization": "segment length", "surface": "map settings", "probes": "probe points"}
#: Case fields that do not: the solve at 1 V does not depend on them.
OUTSIDE = {"title", "criteria", "surface_layer", "soil_fit", "costs", "scenarios", "base_scenario", "notes",
           "site", "source", "sha256"}


def test_every_case_field_is_decided():
    names = {f.name for f in fields(Case)}
    assert names == set(INSIDE) | set(OUTSIDE)
    assert not set(INSIDE) & OUTSIDE


def _case():
    return load_case(ROOT / "cases" / "kestrel-bend-uniform.yaml")


def test_fault_current_clearing_time_and_criteria_share_the_solve():
    case = _case()
    f = case.fault
    other = replace(case, title="x", fault=replace(f, current=2 * f.current, clearing_time=0.9 * f.clearing_time,
                                                   shock_duration=0.9 * f.shock_duration),
                    criteria=replace(case.criteria, body_weight=50), surface_layer=SurfaceLayer(5000.0, 0.1),
                    notes=("a note",))
    assert solve_key(other) == solve_key(case)
    assert hash(solve_key(other)) == hash(solve_key(case))


def test_soil_geometry_and_map_change_the_key():
    case = _case()
    soil = replace(case.soil, layers=(Layer(2 * case.soil.layers[0].resistivity, case.soil.layers[0].thickness),)
                   + case.soil.layers[1:])
    assert solve_key(replace(case, soil=soil)) != solve_key(case)
    d = replace(case.discretization, max_segment=case.discretization.max_segment / 2)
    assert solve_key(replace(case, discretization=d)) != solve_key(case)
    s = replace(case.surface, resolution=case.surface.resolution / 2)
    assert solve_key(replace(case, surface=s)) != solve_key(case)
    rods = case.electrodes.rods[1:]
    assert solve_key(replace(case, electrodes=replace(case.electrodes, rods=rods))) != solve_key(case)


def test_key_fields_are_documented():
    doc = SolveKey.__doc__
    for f in fields(SolveKey):
        assert f.name in doc


def test_coverings_share_the_solve_while_the_zones_keep_their_order_of_severity():
    case = load_case(ROOT / "cases" / "kestrel-bend-seasons.yaml")
    rock, pad = case.surface_zones
    wetter = replace(case, surface_zones=(replace(rock, layer=SurfaceLayer(1500.0, 0.1)), pad))
    assert solve_key(wetter) == solve_key(case)             # rock still more lenient than bare soil, less than pad
    flipped = replace(case, surface_zones=(replace(rock, layer=SurfaceLayer(9000.0, 0.1)), pad))
    assert solve_key(flipped) != solve_key(case)            # rock now more lenient than the pad: steps change zone
