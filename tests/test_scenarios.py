"""Scenarios: conditions a layout must all pass (seasons, wet surface layer, future fault level)."""

from __future__ import annotations

import subprocess
import sys
import textwrap

import pytest

from grounding.case.load import parse_case
from grounding.options.compare import make_options
from grounding.options.design import search
from grounding.options.runner import run_options
from grounding.options.sweep import load_variants
from grounding.outputs.results_json import results_dict
from grounding.study.pipeline import run_study

BASE = """\
format: 1
title: scenario test
soil: {resistivity: 200}
surface_layer: {resistivity: 3000, thickness: 0.1}
fault: {current: 600, split_factor: 0.6, clearing_time: 0.5}
electrodes:
  grids: [{origin: [0, 0], size: [20, 20], meshes: [4, 4], depth: 0.5, diameter: 0.01}]
discretization: {max_segment: 2.0}
surface: {resolution: 1.0}
"""

SCENARIOS = """\
scenarios:
  - {name: measured}
  - {name: dry summer, soil: {resistivity: 300}}
  - {name: wet rock, surface_layer: {resistivity: 2000}}
  - {name: future fault, fault: {current: 800}}
"""



def test_scenarios_give_the_worst_of_the_single_studies():
    combined = run_study(parse_case(BASE + SCENARIOS), estimate_error=False)
    singles = {
        "measured": run_study(parse_case(BASE), estimate_error=False),
        "dry summer": run_study(parse_case(BASE.replace("resistivity: 200", "resistivity: 300")), estimate_error=False),
        "wet rock": run_study(parse_case(BASE.replace("{resistivity: 3000, thickness: 0.1}",
                                                      "{resistivity: 2000, thickness: 0.1}")), estimate_error=False),
        "future fault": run_study(parse_case(BASE.replace("current: 600", "current: 800")), estimate_error=False),
    }
    assert [r.scenario for r in combined.scenarios] == list(singles)
    for name, single in singles.items():
        mine = next(r for r in combined.scenarios if r.scenario == name)
        assert mine.grid_resistance == single.grid_resistance
        assert mine.touch_check.worst == single.touch_check.worst
        assert mine.touch_check.limit == single.touch_check.limit
    for crit in ("touch_check", "step_check", "mesh_check"):
        ratio = {n: getattr(s, crit).worst.value / getattr(s, crit).limit for n, s in singles.items()}
        worst = max(ratio, key=ratio.get)
        c = getattr(combined, crit)
        assert c.scenario == worst
        assert c.worst == getattr(singles[worst], crit).worst
        assert c.ok == all(getattr(s, crit).ok for s in singles.values())
    assert combined.passes == all(s.passes for s in singles.values())
    doc = results_dict(combined)
    assert doc["summary"]["governing_scenario"]["touch"] == combined.touch_check.scenario
    assert [s["name"] for s in doc["scenarios"]] == list(singles)
    assert doc["scenarios"][1]["overrides"] == ["soil"]


def test_scenarios_share_solves_where_the_soil_is_equal():
    combined = run_study(parse_case(BASE + SCENARIOS), estimate_error=False)
    by = {r.scenario: r for r in combined.scenarios}
    assert by["wet rock"].solution is by["measured"].solution
    assert by["future fault"].solution is by["measured"].solution
    assert by["dry summer"].solution is not by["measured"].solution
    # uniform soil: Rg scales with ρ (Rg ∝ ρ for any electrode in uniform soil)
    assert by["dry summer"].grid_resistance == pytest.approx(1.5 * by["measured"].grid_resistance, rel=1e-9)


def test_scenario_blocks_merge_key_by_key():
    case = parse_case(BASE + SCENARIOS)
    wet = next(s for s in case.scenarios if s.name == "wet rock").case
    assert (wet.surface_layer.resistivity, wet.surface_layer.thickness) == (2000, 0.1)
    fut = next(s for s in case.scenarios if s.name == "future fault").case
    assert (fut.fault.current, fut.fault.split_factor) == (800, 0.6)
    assert case.base_scenario == "measured"


@pytest.mark.slow
def test_design_with_scenarios_passes_every_scenario(tmp_path):
    sweep = BASE + SCENARIOS + textwrap.dedent("""\
        costs: {conductor_per_m: 40, rod_per_m: 30, rod_each: 100, surface_layer_per_m2: 5, currency: EUR}
        sweep:
          grid.spacing: [10, 5, 2.5]
          surface_layer.thickness: [0.1, 0.3]
        """)
    path = tmp_path / "s.yaml"
    path.write_text(sweep)
    variants = load_variants(path)
    found = search(variants, by="cost")
    results = run_options([v.case for v in variants], estimate_error=False)
    options = make_options([v.label for v in variants], results)
    # the answer passes in every scenario, and some option passes as written but not in all scenarios,
    # so treating scenarios as conditions changes the answer
    assert found.best is not None
    assert all(r.passes for r in found.best.result.scenarios)
    as_written_only = [o for o in options if o.result.scenarios[0].passes and not o.passes]
    assert as_written_only
    cheaper = [o for o in options if o.quantities.cost < found.best.quantities.cost - 1e-9]
    assert not any(o.passes for o in cheaper)


@pytest.mark.parametrize("extra, message", [
    ("scenarios: []\n", "is empty"),
    ("scenarios:\n  - {name: x, electrodes: {}}\n", "is not a known key"),
    ("scenarios:\n  - {name: a}\n  - {name: b}\n", "replaces nothing"),
    ("scenarios:\n  - {name: hot, soil: {resistivity: -5}}\n", "(in scenario 'hot')"),
])
def test_bad_scenarios_one_line_exit_2(tmp_path, extra, message):
    path = tmp_path / "bad.yaml"
    path.write_text(BASE + extra)
    run = subprocess.run([sys.executable, "-m", "grounding.cli", "check", str(path)], capture_output=True, text=True)
    assert run.returncode == 2
    lines = run.stderr.strip().splitlines()
    assert len(lines) == 1 and message in lines[0], run.stderr
