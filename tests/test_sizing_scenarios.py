"""Conductor sizing under scenarios: judged in every scenario, the governing one named, and a failure named in the
verdict (IEEE Std 80 clause 11: the area needed grows with the fault current and with the clearing time)."""

from __future__ import annotations

import json
import math
import subprocess
import sys

from grounding.case.load import parse_case
from grounding.materials import MATERIALS
from grounding.safety.conductor import check_conductor
from grounding.safety.ieee80 import decrement_factor
from grounding.study.pipeline import run_study

CASE = """\
format: 1
title: sizing under scenarios
soil: {resistivity: 150}
surface_layer: {resistivity: 3000, thickness: 0.1}
fault: {current: 18000, split_factor: 0.4, clearing_time: 0.5, x_over_r: 10}
electrodes:
  grids: [{origin: [0, 0], size: [30, 20], meshes: [6, 4], depth: 0.6, diameter: 0.00874}]
discretization: {max_segment: 2.0}
surface: {resolution: 1.0}
scenarios:
  - name: today
  - name: future fault 25 kA
    fault: {current: 25000}
  - name: slow backup 1.0 s
    fault: {clearing_time: 1.0}
"""


def test_sizing_fails_when_a_scenario_needs_more_than_installed():
    r = run_study(parse_case(CASE), estimate_error=False, uncertainty=False)
    today, future, slow = r.scenarios
    assert today.conductor.ok                                  # 18 kA, 0.5 s fits 60 mm²
    assert not future.conductor.ok and not slow.conductor.ok
    # the governing scenario is the one that needs the most area; the verdict fails with it
    needs = {s.scenario: s.conductor.required_area_mm2 for s in r.scenarios}
    assert r.conductor.scenario == max(needs, key=needs.get)
    assert not r.conductor.ok and not r.passes
    # the area is the standard's own equation at that scenario's current and time (check_conductor as reference)
    material = MATERIALS["copper-annealed"]
    df = decrement_factor(10, 50, 1.0)
    ref = check_conductor(df * 18000, 1.0, material, 40.0, None, 0.00874)
    assert math.isclose(slow.conductor.required_area_mm2, ref.required_area_mm2, rel_tol=1e-12)
    failing = " ".join(r.failures())
    assert "conductor sizing" in failing and "future fault 25 kA" in failing and "slow backup 1.0 s" in failing


def test_outputs_name_the_sizing_failure(tmp_path):
    path = tmp_path / "s.yaml"
    path.write_text(CASE)
    run = subprocess.run([sys.executable, "-m", "grounding.cli", "study", str(path), "--quiet", "--json",
                          str(tmp_path / "s.json")], capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    text = " ".join(run.stdout.split())
    assert "Failing:" in text and "conductor sizing" in text
    assert "area needed per scenario: today" in text
    doc = json.loads((tmp_path / "s.json").read_text())
    assert doc["conductor"]["ok"] is False and doc["conductor"]["scenario"] == "slow backup 1.0 s"
    assert [p["ok"] for p in doc["conductor"]["per_scenario"]] == [True, False, False]
    assert any(f.startswith("conductor sizing") for f in doc["failing"])
