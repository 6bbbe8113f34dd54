"""How sure is the verdict: discretisation error bars on the worst voltages, convergence by refinement,
and soil uncertainty carried to σ and the probability that a limit is exceeded."""

from __future__ import annotations

import json
import math
import subprocess
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from grounding.case.load import load_case, parse_case
from grounding.study.converge import converge_study, refined
from grounding.study.pipeline import run_study
from grounding.study.uncertainty import (
    parameter_covariance,
    propagate_soil_uncertainty,
    reference_sensitivities,
    sample_worst,
)

ROOT = Path(__file__).resolve().parents[1]

GRID = """\
format: 1
title: error bars
soil: {{resistivity: 200}}
surface_layer: {{resistivity: 2500, thickness: 0.1}}
fault: {{current: {current}, split_factor: 0.6, clearing_time: 0.5}}
electrodes:
  grids: [{{origin: [0, 0], size: [30, 24], meshes: [5, 4], depth: 0.5, diameter: 0.01}}]
  rods: [{{top: [0, 0, 0.5], length: 3, diameter: 0.016}}, {{top: [30, 24, 0.5], length: 3, diameter: 0.016}}]
discretization: {{max_segment: {h}}}
surface: {{resolution: {r}}}
"""


def _grid(h, r, current=3000):
    return parse_case(GRID.format(h=h, r=r, current=current))


@pytest.fixture(scope="module")
def ladder():
    """The same grid at 2, 1 and 0.5 m segments (map 1, 0.5, 0.25 m), and a reference at 0.25 m / 0.125 m."""
    return [run_study(_grid(h, r)) for h, r in ((2, 1), (1, 0.5), (0.5, 0.25), (0.25, 0.125))]


@pytest.mark.parametrize("crit", ["touch_check", "step_check", "mesh_check"])
def test_voltage_error_estimates_shrink_and_cover_the_error(ladder, crit):
    errors = [getattr(r, crit).error for r in ladder[:3]]
    assert all(e is not None and e > 0 for e in errors)
    assert errors[2] < errors[0]                                # first-order convergence, as for Rg
    ref = getattr(ladder[3], crit).worst.value
    for r in ladder[1:3]:                                       # the estimate covers the true error
        c = getattr(r, crit)
        assert abs(c.worst.value - ref) <= 1.5 * c.error + 1e-9 * ref


@pytest.mark.slow
def test_converge_settles_within_one_percent_of_a_finer_reference(ladder):
    result, conv = converge_study(_grid(2, 1))
    assert conv.converged and len(conv.rounds) >= 2
    assert result.convergence is conv
    ref = ladder[3]
    for crit in ("touch_check", "step_check", "mesh_check"):
        assert getattr(result, crit).worst.value == pytest.approx(getattr(ref, crit).worst.value, rel=0.01)
    assert result.case.discretization.max_segment == conv.rounds[-1].max_segment


def test_converge_stops_before_a_model_too_large(monkeypatch):
    import grounding.solve.policy as policy

    monkeypatch.setattr(policy, "MAX_MAP_POINTS", 3000)            # the next map would exceed this
    result, conv = converge_study(_grid(2, 1), tolerance=1e-9)
    assert not conv.converged and "stopped before round" in conv.note


def test_converge_plans_each_round_and_stops_at_the_time_allowed(monkeypatch):
    """A round predicted (from the last round's time) to end after --max-time is not run; the note says which and
    why, and the result is the last round reached, studied in full."""
    import grounding.study.converge as C
    monkeypatch.setattr(C, "FIRST_GROWTH", 1e6)                   # any next round looks far too long
    lines = []
    result, conv = converge_study(_grid(2, 1), tolerance=1e-9, max_time=60, say=lines.append)
    assert len(conv.rounds) == 1 and not conv.converged
    assert "stopped before round 2 (1 m segments" in conv.note and "time allowed (60 s" in conv.note
    assert "not refined" in conv.note
    assert result.case.discretization.max_segment == 2 and result.touch_check.error is not None
    assert lines and lines[0].startswith("converge round 1: max_segment 2 m")


def test_converge_refines_only_the_governing_scenarios():
    """Rounds after the first study only the scenarios that govern; their governing checks are the whole case's."""
    from grounding.study.converge import focus
    text = GRID.format(h=2, r=1, current=3000) + (
        "scenarios:\n  - name: now\n  - name: wet\n    surface_layer: {resistivity: 800, thickness: 0.1}\n"
        "  - name: small fault\n    fault: {current: 1000}\n")
    case = parse_case(text)
    whole = run_study(case, uncertainty=False, estimate_error=False)
    narrowed = focus(case, whole)
    assert [sc.name for sc in narrowed.scenarios] == ["wet"]      # the covering that lowers the limits governs
    part = run_study(narrowed, uncertainty=False, estimate_error=False)
    for crit in ("touch_check", "step_check", "mesh_check"):
        assert getattr(part, crit).worst.value == getattr(whole, crit).worst.value
        assert getattr(part, crit).scenario == getattr(whole, crit).scenario


def test_limit_inside_the_error_band_is_marginal():
    """Touch voltage is linear in the fault current: choose the current that puts it on the limit."""
    probe = run_study(_grid(2, 1))
    c = probe.touch_check
    current = 3000 * c.limit / c.worst.value
    r = run_study(_grid(2, 1, current=current))
    assert r.touch_check.limit_within_error
    from grounding.outputs.summary_text import study_summary
    assert "MARGINAL (touch)" in study_summary(r)
    assert "±" in study_summary(r)


def test_sigma_of_rg_in_uniform_soil_is_sigma_of_rho():
    """Rg ∝ ρ in uniform soil (any electrode), so σ(Rg) = σ(ρ)·Rg exactly, and every voltage moves with ρ."""
    case = parse_case(GRID.format(h=2, r=1, current=3000).replace("soil: {resistivity: 200}",
                                                                  "soil: {resistivity: 200, uncertainty: {resistivity: 0.15}}"))
    r = run_study(case, estimate_error=False)
    u = propagate_soil_uncertainty(r)
    q = u.quantities["grid_resistance"]
    assert q.sigma == pytest.approx(0.15 * r.grid_resistance, rel=1e-9)
    assert q.sensitivities[0] == pytest.approx(1.0, rel=1e-9)
    assert u.extra_solves == 0                  # Euler's theorem: no solve needed for the only resistivity
    for key in ("touch", "step", "mesh"):       # every voltage scales with ρ (the limit moves only with Cs)
        assert u.quantities[key].sensitivities[0] == pytest.approx(1.0, rel=1e-9)


MC_CASE = """\
format: 1
title: monte carlo
soil:
  layers: [{resistivity: 300, thickness: 1.5}, {resistivity: 80}]
  uncertainty: {resistivity: 0.2, thickness: 0.3}
surface_layer: {resistivity: 2500, thickness: 0.1}
fault: {current: 90, split_factor: 1, clearing_time: 0.5}
electrodes:
  conductors: [{start: [0, 0, 0.5], end: [6, 0, 0.5], diameter: 0.01}]
  rods: [{top: [0, 0, 0.5], length: 3, diameter: 0.016}, {top: [6, 0, 0.5], length: 3, diameter: 0.016}]
discretization: {max_segment: 1.0}
surface: {resolution: 1.0, margin: 2}
"""


MC_GRID = GRID.format(h=1, r=1, current=3000).replace(
    "soil: {resistivity: 200}",
    "soil: {layers: [{resistivity: 300, thickness: 1.5}, {resistivity: 80}], uncertainty: {resistivity: 0.2, thickness: 0.3}}")


@pytest.mark.slow
def test_linear_propagation_against_monte_carlo():
    """First-order propagation against a Monte Carlo of 200 full studies (numpy's generator, seed 1): the
    probability that the touch limit is exceeded within 0.05, σ(log) of Rg and the worst voltages within 10 %."""
    case = parse_case(MC_CASE)
    r = run_study(case, estimate_error=False)
    u = propagate_soil_uncertainty(r)
    assert u.extra_solves == 2                  # ρ2 from Euler's theorem (Σ S_ρ = 1)
    mc = sample_worst(case, 200, seed=1, workers=2)      # two processes: the same draws and results
    first = sample_worst(case, 3, seed=1)                # as one process gives (numpy draws row by row)
    for key, values in first.items():
        np.testing.assert_array_equal(values, mc[key][:3])
    for key in ("touch", "step"):
        p_mc = float(np.mean(mc[f"{key}_ratio"] > 1))
        assert u.quantities[key].probability_exceeds_limit == pytest.approx(p_mc, abs=0.05)
    assert 0.2 < u.quantities["touch"].probability_exceeds_limit < 0.9      # a discriminating case
    for key in ("grid_resistance", "touch", "step"):
        assert u.quantities[key].sigma_log == pytest.approx(float(np.std(np.log(mc[key]))), rel=0.10)


def test_worst_points_revisited_agree_with_studies_per_parameter():
    """The propagation without a new search (worst points revisited, one resistivity by Euler's theorem) against
    the former one (a whole study with its own search per parameter) on the fitted demo: σ(log) of every
    quantity within 10 % (the target the method was built to), sensitivities of Rg within 0.02."""
    case = load_case(ROOT / "cases" / "kestrel-bend-fitted.yaml")
    r = run_study(case, estimate_error=False)
    u = r.uncertainty
    cov, _ = parameter_covariance(case)
    ref = reference_sensitivities(case)
    np.testing.assert_allclose(u.quantities["grid_resistance"].sensitivities, ref["grid_resistance"], atol=0.02)
    for key in ("grid_resistance", "touch", "step", "mesh"):
        s = ref[key]
        assert u.quantities[key].sigma_log == pytest.approx(math.sqrt(s @ cov @ s), rel=0.10), key


def test_sensitivities_at_twice_the_segment_length_agree(monkeypatch):
    """Large models take the sensitivities at twice the segment length (uncertainty.COARSE_FROM); on a two-layer
    grid forced to do so they agree with those at the study's own level within 0.02 and σ(log) within 5 %."""
    import grounding.study.uncertainty as U
    case = parse_case(MC_GRID)
    r = run_study(case, estimate_error=False, uncertainty=False)
    fine = U.propagate_soil_uncertainty(r)
    monkeypatch.setattr(U, "COARSE_FROM", 10)
    coarse = U.propagate_soil_uncertainty(r)
    assert "twice" in coarse.level and "own" in fine.level
    assert coarse.extra_solves == fine.extra_solves + 1                # the coarse base solve
    for key in ("grid_resistance", "touch", "step", "mesh"):
        np.testing.assert_allclose(coarse.quantities[key].sensitivities, fine.quantities[key].sensitivities,
                                   atol=0.02, err_msg=key)
        assert coarse.quantities[key].sigma_log == pytest.approx(fine.quantities[key].sigma_log, rel=0.05), key


def test_error_estimate_solve_is_the_sensitivities_base(monkeypatch):
    """A whole study that takes its sensitivities at twice the segment length solves that level once: the error
    estimate's solve is the propagation's base (CoarseSolves), so only the nudged soils cost a solve, and the
    result equals the propagation made on its own."""
    import grounding.study.uncertainty as U
    monkeypatch.setattr(U, "COARSE_FROM", 10)
    monkeypatch.setattr(U, "COARSE_FLOOR", 10 ** 9)                  # twice, not four times
    case = parse_case(MC_GRID)
    whole = run_study(case)
    alone = U.propagate_soil_uncertainty(run_study(case, uncertainty=False))
    assert "twice" in whole.uncertainty.level
    assert whole.uncertainty.extra_solves == alone.extra_solves - 1      # the base solve was shared
    for key in ("grid_resistance", "touch", "step", "mesh"):
        assert whole.uncertainty.quantities[key].sensitivities == alone.quantities[key].sensitivities, key


def test_sensitivities_at_four_times_the_segment_length_agree(monkeypatch):
    """Where the model at four times the segment length keeps uncertainty.COARSE_FLOOR segments the sensitivities
    are taken there; on the two-layer grid forced to do so σ(log) agrees with the study's own level within 5 %."""
    import grounding.study.uncertainty as U
    case = parse_case(MC_GRID)
    r = run_study(case, estimate_error=False, uncertainty=False)
    fine = U.propagate_soil_uncertainty(r)
    monkeypatch.setattr(U, "COARSE_FROM", 10)
    monkeypatch.setattr(U, "COARSE_FLOOR", 10)
    coarse = U.propagate_soil_uncertainty(r)
    assert "four times" in coarse.level
    for key in ("grid_resistance", "touch", "step", "mesh"):
        assert coarse.quantities[key].sigma_log == pytest.approx(fine.quantities[key].sigma_log, rel=0.05), key


@pytest.mark.parametrize("value", ["0", "1", "-0.1", "1.5"])
def test_bad_uncertainty_one_line_exit_2(tmp_path, value):
    path = tmp_path / "u.yaml"
    path.write_text(MC_CASE.replace("uncertainty: {resistivity: 0.2, thickness: 0.3}",
                                    f"uncertainty: {{resistivity: {value}, thickness: 0.3}}"))
    run = subprocess.run([sys.executable, "-m", "grounding.cli", "check", str(path)], capture_output=True, text=True)
    assert run.returncode == 2
    lines = run.stderr.strip().splitlines()
    assert len(lines) == 1 and "soil.uncertainty.resistivity" in lines[0], run.stderr


def test_study_json_carries_error_bars_and_uncertainty(tmp_path):
    path = tmp_path / "u.yaml"
    path.write_text(MC_CASE)
    out = tmp_path / "r.json"
    run = subprocess.run([sys.executable, "-m", "grounding.cli", "study", str(path), "--quiet", "--json", str(out)],
                         capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    doc = json.loads(out.read_text())
    ve = doc["diagnostics"]["voltage_error"]
    assert ve["touch_v"] is not None and ve["step_v"] is not None
    u = doc["uncertainty"]
    assert u["extra_solves"] == 2            # ρ2 by Euler's theorem
    for key in ("grid_resistance_ohm", "ground_potential_rise_v"):
        assert u[key]["sigma"] > 0
    for key in ("max_touch_voltage_v", "max_step_voltage_v"):
        assert 0 <= u[key]["probability_exceeds_limit"] <= 1
    text = " ".join(run.stdout.split())                    # wrapped lines joined
    assert "P(limit exceeded)" in text and "extra solves" in text


def test_refined_case_refines_every_scenario():
    case = parse_case(GRID.format(h=2, r=1, current=3000) + "scenarios:\n  - {name: dry, soil: {resistivity: 600}}\n")
    finer = refined(case, 0.5, 0.25)
    assert finer.scenarios[0].case.discretization.max_segment == 0.5
    assert finer.scenarios[0].case.surface.resolution == 0.25
    assert math.isclose(finer.surface.resolution, 0.25)


def test_rod_error_bar_covers_its_slow_convergence():
    """A lone 3 m rod (16 mm, 100 Ω·m) converges slowly in the segment length (order about 0.4, not 1) and its
    1 m discretisation does not halve at 2 m (3 → 2 segments): the estimate uses the ratio made and the rods'
    order, and covers the difference to the same rod at 0.125 m (itself still above the limit; the refinement
    continues to fall, so that difference is a lower bound of the true error)."""
    text = """format: 1
soil: {resistivity: 100}
fault: {current: 1000, clearing_time: 0.5}
electrodes:
  rods: [{top: [0, 0, 0.0], length: 3, diameter: 0.016}]
discretization: {max_segment: %g}
"""
    coarse = run_study(parse_case(text % 1.0), uncertainty=False)
    fine = run_study(parse_case(text % 0.125), estimate_error=False, uncertainty=False)
    err = coarse.discretization_error
    assert err.order == pytest.approx(0.4) and err.refinement_ratio == pytest.approx(1.5)
    assert err.estimate_ohm >= coarse.grid_resistance - fine.grid_resistance > 0
    assert err.estimate_ohm < 3 * (coarse.grid_resistance - fine.grid_resistance)     # not a blanket bound


ERROR_BAR_CASES = sorted(str(p) for p in (ROOT / "cases").glob("*.yaml")) + \
    sorted(str(p) for p in (ROOT / "tests" / "golden" / "cases").glob("*.yaml"))


@pytest.mark.slow
@pytest.mark.parametrize("path", ERROR_BAR_CASES, ids=lambda p: Path(p).stem)
def test_error_bars_cover_a_model_four_times_finer(path):
    """On every demo and golden case the reported ± of Rg covers the difference to the same case at a quarter of
    the segment length (same map), and so does the upper end of the band of the worst touch, step and mesh
    voltages (value + ± ≥ the finer model's: the side a verdict depends on). The estimate is Richardson's with the
    factor of safety 1.25 of Roache's grid convergence index (P. J. Roache, Verification and Validation in
    Computational Science and Engineering, 1998; without it two cases were not covered) on rods refined at their
    ends (geometry.segments.ROD_END_GRADING; without it the step beside the bonded fence posts was 8.7 % low).
    Known: the step voltage of the isolated-fence demo lies 1.0 % *above* the finer model with ± 0.25 % (the
    change at that point is 1 V from 2 m to 1 m segments but 10 V from 1 m to 0.5 m: not yet in the asymptotic
    range), so the lower end of its band does not cover; the reported value errs on the safe side there."""
    case = replace(load_case(path), scenarios=())
    r = run_study(case, uncertainty=False)
    if r.discretization_error.estimate_ohm is None:
        pytest.skip(f"no estimate made: {r.discretization_error.note}")
    d = case.discretization
    fine = run_study(replace(case, discretization=replace(d, max_segment=d.max_segment / 4)), estimate_error=False,
                     uncertainty=False, screen_drop=False)
    assert abs(r.grid_resistance - fine.grid_resistance) <= r.discretization_error.estimate_ohm
    for crit in ("touch_check", "step_check", "mesh_check"):
        c, f = getattr(r, crit), getattr(fine, crit)
        if c.worst is None:
            continue
        assert f.worst.value <= c.worst.value + c.error, crit


def test_scope_names_the_condition_and_what_other_scenarios_take():
    """The propagation is of the case as written: its outputs say so, and say that scenarios with the same solve share
    the relative σ, not the probability (theirs is their own), and that scenarios with another soil are not propagated."""
    from types import SimpleNamespace as NS

    from grounding.study.uncertainty import scope_of

    def cond(name, key):
        return NS(scenario=name, diagnostics=NS(solve=NS(key=key)), case=NS(soil=None))

    base, rock, dry = cond("measured", "k1"), cond("wet rock", "k1"), cond("dry", "k2")
    scope = scope_of(NS(scenarios=(base, rock, dry)))
    assert scope.startswith("for the case as written ('measured')")
    assert "same solve ('wet rock')" in scope and "their own probabilities" in scope
    assert "another soil ('dry') are not propagated" in scope
    assert scope_of(NS(scenarios=())) == ""


def test_a_scenario_with_the_same_solve_gets_its_own_probability_and_warning():
    """A scenario that only raises the fault current shares the case's solve: its P(limit exceeded) is its own (the
    same sensitivities, its own thinner margin) and equals the propagation of that scenario studied on its own; it
    passes narrowly, so the summary warns about it even though the case as written is far from its limit (before,
    only the case as written's probability was looked at and this thin pass went unremarked)."""
    from grounding.outputs.results_json import results_dict
    from grounding.outputs.summary_text import study_summary
    from grounding.study.uncertainty import uncertain_passes

    probe = run_study(parse_case(MC_CASE), estimate_error=False, uncertainty=False)
    per_amp = probe.touch_check.worst.value / probe.touch_check.limit / 90.0
    thin = 0.97 / per_amp                                 # the scenario's touch at 97 % of its limit
    text = MC_CASE.replace("fault: {current: 90,", f"fault: {{current: {thin / 2:.6f},")
    case = parse_case(text + f"scenarios:\n  - {{name: as written}}\n  - {{name: thin, fault: {{current: {thin:.6f}}}}}\n")
    r = run_study(case, estimate_error=False)
    u = r.uncertainty
    shared = dict(u.scenario_probabilities)["thin"]
    alone = run_study(parse_case(MC_CASE.replace("fault: {current: 90,", f"fault: {{current: {thin:.6f},")),
                      estimate_error=False).uncertainty
    for k in ("touch", "step", "mesh"):
        if shared[k] is not None:
            assert shared[k] == pytest.approx(alone.quantities[k].probability_exceeds_limit, rel=1e-9, abs=1e-12), k
    assert shared["touch"] is not None and 0.3 < shared["touch"] < 0.6          # Φ(log 0.97 / σ), σ ≈ 0.1
    assert u.quantities["touch"].probability_exceeds_limit < 0.05               # the case as written: wide margin
    assert r.scenarios[1].touch_check.ok
    assert any(scenario == "thin" and name == "touch" for scenario, name, _ in uncertain_passes(r))
    assert "MARGINAL (touch, scenario 'thin')" in " ".join(study_summary(r).split())
    marginal = results_dict(r)["uncertainty"]["marginal"]
    touch = next(m for m in marginal if m["criterion"] == "touch")
    assert {"criterion": "touch", "scenario": "thin"}.items() <= touch.items()
