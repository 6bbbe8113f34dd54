"""The fall-of-potential commissioning test (IEEE Std 81): the predicted curve against textbook superposition,
the 61.8 % rule where it holds and where it does not, reading measured curves back, and bad input."""

from __future__ import annotations

import json
import math
import subprocess
import sys

import numpy as np
import pytest

from grounding.case.load import parse_case
from grounding.study.fall_of_potential import apparent_curve, fit_measured, predict_test

ROD = """\
format: 1
soil: {resistivity: 100}
fault: {current: 1000, clearing_time: 0.5}
electrodes:
  rods: [{top: [0, 0, 0.0], length: 3, diameter: 0.016}]
discretization: {max_segment: 0.25}
"""

GRID = """\
format: 1
soil: {resistivity: 100}
fault: {current: 1000, clearing_time: 0.5}
electrodes:
  grids: [{origin: [0, 0], size: [60, 60], meshes: [6, 6], depth: 0.5, diameter: 0.01}]
discretization: {max_segment: 2.0}
"""


def _line_source(rho, length, x):
    """Surface potential (V per A) at horizontal distance x (m) from a vertical line source of ``length`` (m) from
    the surface down, uniform leakage, with its image in the surface: ρ/(2πL)·asinh(L/x) (the superposition behind
    the 61.8 % rule in IEEE Std 81; e.g. Tagg, Earth Resistances, 1964)."""
    return rho / (2 * math.pi * length) * np.arcsinh(length / x)


def test_rod_curve_against_superposition_of_line_sources():
    """A 3 m rod, current rod (1 m) 100 m away, uniform 100 Ω·m: V_g − V(x) against the grid potential minus the
    two line sources' potentials (+1 A, −1 A); away from the electrodes the non-uniform leakage of the solved rods
    does not show (1e-3); near the rod it does (a few 1e-3)."""
    f = predict_test(parse_case(ROD), (0, 0), (100, 0), plan=False)
    c = f.curve
    x = c.distances
    ref = c.grid_potential - (_line_source(100, 3.0, x) - _line_source(100, 1.0, 100 - x))
    far = (x > 10) & (x < 90)
    np.testing.assert_allclose(c.apparent[far], ref[far], rtol=1e-3)
    # the grid's potential is its own resistance less the current rod's potential at 100 m (mutual resistance)
    assert c.grid_potential == pytest.approx(f.true_resistance - _line_source(100, 1.0, 100.0), rel=1e-3)


def test_618_rule_holds_for_a_small_electrode_far_from_the_current_rod():
    """IEEE Std 81: for a hemisphere-like electrode in uniform soil the probe at 61.8 % reads the true value."""
    f = predict_test(parse_case(ROD), (0, 0), (100, 0), plan=False)
    assert abs(f.rule_618[2]) < 0.005
    assert f.probe_distance_for_true == pytest.approx(61.8, abs=1.0)


def test_618_rule_reads_high_for_a_grid_with_a_near_current_rod():
    """A 60 m × 60 m grid in uniform soil, the current rod 300 m from the grid edge: the 61.8 % reading is about 2 %
    above the true value and the true value is read near 58 % (the issue's figures, from an independent solver;
    checked here as bounds: 1–3 % high, crossing between 55 % and 61 % of the current-rod distance)."""
    f = predict_test(parse_case(GRID), (60, 30), (360, 30), plan=False)
    assert 0.01 < f.rule_618[2] < 0.03
    assert 0.55 < f.probe_distance_for_true / f.curve.rod_distance < 0.61


def test_planning_distances_grow_with_the_accuracy_asked():
    f = predict_test(parse_case(GRID), (60, 30), (360, 30))
    plan = f.planning
    assert plan[0.05] is not None and plan[0.02] is not None
    assert plan[0.05] <= plan[0.02] <= (plan[0.01] if plan[0.01] is not None else math.inf)


def test_measured_curve_is_read_back_within_its_standard_error():
    """A synthetic measured curve: the model in a soil 1.3 times as resistive, with 2 % noise (numpy's generator,
    seed 3); the fitted resistivity scale and true resistance come back within 2.5 standard errors."""
    case = parse_case(GRID)
    f = predict_test(case, (60, 30), (360, 30), plan=False)
    d = np.linspace(20, 280, 14)
    wetter = parse_case(GRID.replace("resistivity: 100", "resistivity: 130"))
    true_curve = apparent_curve(wetter, (60, 30), (360, 30), d, 0.0, 1.0, 0.016).apparent
    noisy = true_curve * (1 + 0.02 * np.random.default_rng(3).standard_normal(len(d)))
    fit = fit_measured(case, f, d, noisy)
    assert abs(fit.scale - 1.3) < 2.5 * fit.scale_error and fit.scale_error < 0.02
    assert abs(fit.true_resistance - 1.3 * f.true_resistance) < 2.5 * fit.true_resistance_error


def _cli(tmp_path, *args):
    case = tmp_path / "g.yaml"
    case.write_text(GRID)
    return subprocess.run([sys.executable, "-m", "grounding.cli", "fall-of-potential", str(case), *args],
                          capture_output=True, text=True)


def test_command_line_writes_json_and_plot(tmp_path):
    readings = tmp_path / "m.csv"
    readings.write_text("# invented readings\ndistance_m,resistance_ohm\n50,1.2\n100,1.35\n150,1.45\n200,1.55\n")
    run = _cli(tmp_path, "--from", "60,30", "--current-at", "360,30", "--no-plan", "--measured", str(readings),
               "--json", str(tmp_path / "f.json"), "--plot", str(tmp_path / "f.png"))
    assert run.returncode == 0, run.stderr
    doc = json.loads((tmp_path / "f.json").read_text())
    assert doc["true_resistance_ohm"] > 0 and len(doc["curve"]) >= 39
    assert doc["rule_618"]["error_fraction"] > 0 and doc["measured"]["fitted_true_resistance_ohm"] > 0
    assert doc["cautions"] and (tmp_path / "f.png").read_bytes()[:4] == b"\x89PNG"
    assert "61.8 % rule" in run.stdout and "CAUTION" in run.stdout


@pytest.mark.parametrize("args, words", [
    (["--from", "60,30", "--current-at", "30,30"], "inside the grid's footprint"),
    (["--from", "60,30", "--current-at", "360,30", "--probes", "100,310"], "beyond the current rod"),
    (["--from", "60", "--current-at", "360,30"], "give two numbers in metres"),
])
def test_bad_test_layout_is_one_line_exit_2(tmp_path, args, words):
    run = _cli(tmp_path, *args, "--no-plan")
    assert run.returncode == 2 and len(run.stderr.strip().splitlines()) == 1 and words in run.stderr, run.stderr


@pytest.mark.parametrize("text, words", [
    ("", "has no header row"),
    ("distance_m,resistance_ohm\n50,1.2\n40,1.3\n60,1.4\n", "does not increase"),
    ("distance_m,resistance_ohm\n50,1.2\n", "at least 3"),
    ("distance_m,resistance_ohm\n50,-1\n60,1\n70,1\n", "positive resistance"),
])
def test_bad_readings_are_one_line_exit_2(tmp_path, text, words):
    readings = tmp_path / "m.csv"
    readings.write_text(text)
    run = _cli(tmp_path, "--from", "60,30", "--current-at", "360,30", "--no-plan", "--measured", str(readings))
    assert run.returncode == 2 and len(run.stderr.strip().splitlines()) == 1 and words in run.stderr, run.stderr


def test_slope_method_recovers_an_offset_hemisphere_exactly():
    """Tagg's slope method (IEEE Std 81) is exact for its own model: a hemisphere whose electrical centre lies X
    behind the start, R(P) = R_T − ρ/2π·[1/(C + X) + 1/(P + X) − 1/(C − P)]."""
    from grounding.study.fall_of_potential import slope_method
    c, x, rt, k = 300.0, 25.0, 1.5, 100 / (2 * math.pi)
    p = np.linspace(10, 290, 57)
    sm = slope_method(p, rt - k * (1 / (c + x) + 1 / (p + x) - 1 / (c - p)), c)
    assert sm.true_resistance == pytest.approx(rt, rel=1e-9)
    assert 1 / (c + x) + 1 / (sm.probe_distance_for_true + x) == pytest.approx(1 / (c - sm.probe_distance_for_true))


def test_slope_method_on_a_grid_beats_the_618_rule():
    """On the 60 m grid with the current rod 300 m from its edge the slope method's estimate is nearer the true
    value than the 61.8 % reading (the reason IEEE Std 81 gives it for large electrodes)."""
    from grounding.study.fall_of_potential import slope_method
    f = predict_test(parse_case(GRID), (60, 30), (360, 30), plan=False)
    sm = slope_method(f.curve.distances, f.curve.apparent, f.curve.rod_distance)
    assert abs(sm.true_resistance / f.true_resistance - 1) < abs(f.rule_618[2])
    assert abs(sm.true_resistance / f.true_resistance - 1) < 0.01
