"""Layout options: compare, sweep and design; serial, process-pool and Dask runs agree exactly."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from click.testing import CliRunner

from grounding.case.load import load_case
from grounding.cli import main
from grounding.errors import CaseError
from grounding.options.compare import best_option, make_options
from grounding.options.design import search
from grounding.options.runner import group_by_geometry, run_options
from grounding.options.sweep import load_variants
from grounding.study.pipeline import run_study

SWEEP = """\
format: 1
title: options test
soil: {resistivity: 150}
surface_layer: {resistivity: 3000, thickness: 0.1}
fault: {current: 2500, split_factor: 0.5, clearing_time: 0.3}
costs: {conductor_per_m: 40, rod_per_m: 30, rod_each: 100, surface_layer_per_m2: 5, currency: EUR}
electrodes:
  grids: [{origin: [0, 0], size: [20, 16], meshes: [2, 2], depth: 0.5, diameter: 0.01}]
  rods: [{top: [0, 0, 0.5], length: 3, diameter: 0.016}]
discretization: {max_segment: 2.0}
surface: {margin: 2, resolution: 2.0}
sweep:
  grid.spacing: [10, 5]
  rods.layout: [none, perimeter]
  surface_layer.thickness: [0.1, 0.3]
"""


@pytest.fixture(scope="module")
def sweep_file(tmp_path_factory):
    path = tmp_path_factory.mktemp("sweep") / "sweep.yaml"
    path.write_text(SWEEP)
    return path


@pytest.fixture(scope="module")
def variants(sweep_file):
    return load_variants(sweep_file)


@pytest.fixture(scope="module")
def serial(variants):
    return run_options([v.case for v in variants], estimate_error=False)


def summary(r):
    s = r.surface
    return (r.grid_resistance, r.ground_potential_rise, s.max_touch.value, s.max_touch.x, s.max_touch.y,
            s.max_step.value, s.max_mesh.value if s.max_mesh else None, r.tolerable_touch, r.tolerable_step)


def test_sweep_expands_every_combination(variants):
    assert len(variants) == 8
    first = variants[0].case
    assert first.electrodes.grids[0].meshes == (2, 2) and first.electrodes.rods == ()
    dense = [v for v in variants if dict(v.settings)["grid.spacing"] == 5][0].case
    assert dense.electrodes.grids[0].meshes == (4, 4)
    perim = [v for v in variants if dict(v.settings)["rods.layout"] == "perimeter"][0].case
    assert len(perim.electrodes.rods) == 8                       # 2 × 2 meshes: 8 perimeter nodes


def test_options_sharing_geometry_share_one_solve(variants):
    groups = group_by_geometry([v.case for v in variants])
    assert len(groups) == 4                                       # surface-layer thickness does not change geometry
    assert all(len(g) == 2 for g in groups)


def test_sweep_results_match_individual_studies(variants, serial):
    for v, r in zip(variants, serial):
        alone = run_study(v.case, estimate_error=False)
        assert summary(alone) == pytest.approx(summary(r), rel=1e-12)


def test_process_pool_identical_to_serial(variants, serial):
    pooled = run_options([v.case for v in variants], workers=2, estimate_error=False)
    assert [summary(r) for r in pooled] == [summary(r) for r in serial]


@pytest.mark.cluster
def test_dask_local_cluster_identical_to_serial(variants, serial):
    """Same numbers to rounding: Dask's workers run BLAS single-threaded, which changes the order of
    floating-point sums in matrix products (seen: 1 unit in the last place of one step voltage)."""
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as lc:
        on_dask = run_options([v.case for v in variants], cluster=lc.scheduler_address, estimate_error=False)
    for a, b in zip(on_dask, serial):
        assert summary(a) == pytest.approx(summary(b), rel=1e-12, abs=1e-12)


def test_design_answer_passes_and_nothing_cheaper_does(variants, serial):
    found = search(variants, by="cost")
    options = make_options([v.label for v in variants], serial)
    assert found.best is not None and found.best.passes
    cheaper = [o for o in options if o.quantities.cost < found.best.quantities.cost - 1e-9]
    assert cheaper and not any(o.passes for o in cheaper)
    assert found.best.quantities.cost == pytest.approx(min(o.quantities.cost for o in options if o.passes))


def test_best_option_criteria(variants, serial):
    options = make_options([v.label for v in variants], serial)
    i, _ = best_option(options, "resistance")
    assert options[i].result.grid_resistance == min(o.result.grid_resistance for o in options)
    i, _ = best_option(options, "margin")
    assert options[i].worst_margin == max(o.worst_margin for o in options)
    i, _ = best_option(options, "cost")
    assert options[i].passes


def test_compare_command_json(tmp_path, variants):
    files = []
    for k, v in enumerate(variants[:2]):
        p = tmp_path / f"o{k}.yaml"
        import yaml
        p.write_text(yaml.safe_dump(v.data))
        files.append(str(p))
    out = tmp_path / "cmp.json"
    res = CliRunner().invoke(main, ["compare", *files, "--json", str(out), "--by", "resistance", "--quiet"])
    assert res.exit_code == 0, res.output
    doc = json.loads(out.read_text())
    assert [o["case"] for o in doc["options"]] == files
    assert doc["best"] in (0, 1) and doc["criterion"] == "resistance"
    alone = run_study(load_case(files[1]))
    assert doc["options"][1]["summary"]["grid_resistance_ohm"] == pytest.approx(alone.grid_resistance, rel=1e-5)
    assert {"conductor_length_m", "rod_count", "rod_length_m", "mass_kg", "cost"} <= set(doc["options"][0]["quantities"])
    assert "licensed professional engineer" in " ".join(doc["cautions"])


def _option_files(tmp_path, variants, n=2):
    import yaml

    files = []
    for k, v in enumerate(variants[:n]):
        p = tmp_path / f"o{k}.yaml"
        p.write_text(yaml.safe_dump(v.data))
        files.append(str(p))
    return files


def test_compare_reuses_the_json_results_of_the_same_case(tmp_path, variants, monkeypatch):
    """A study's --json results stand in for solving that case again (issue: compare re-solved every case);
    the table and CSV equal those of a full comparison to the results file's 6 significant digits."""
    import csv

    import grounding.options.runner as runner

    files = _option_files(tmp_path, variants)
    res = CliRunner().invoke(main, ["study", files[0], "--quiet", "--json", str(tmp_path / "a.json")])
    assert res.exit_code == 0, res.output
    solved = []
    real = runner.run_options

    def counting(cases, **kw):
        solved.append([c.source for c in cases])
        return real(cases, **kw)

    monkeypatch.setattr(runner, "run_options", counting)
    full = CliRunner().invoke(main, ["compare", *files, "--csv", str(tmp_path / "full.csv"), "--quiet"])
    reuse = CliRunner().invoke(main, ["compare", *files, "--results", str(tmp_path / "a.json"), "--csv",
                                      str(tmp_path / "re.csv"), "--json", str(tmp_path / "re.json"), "--quiet"])
    assert full.exit_code == 0 and reuse.exit_code == 0, reuse.output
    assert solved == [files, files[1:]]                       # the recorded case was not solved again
    assert "a.json: results of" in reuse.output and "not solved again" in reuse.output
    rows = [list(csv.reader((tmp_path / f).read_text().splitlines()[1:])) for f in ("full.csv", "re.csv")]
    head = rows[0][0]
    for a, b in zip(rows[0][1:], rows[1][1:]):
        for key, x, y in zip(head, a, b):
            if key.endswith("margin"):
                assert float(x) == pytest.approx(float(y), abs=2e-4)   # margins from 6-digit values
            else:
                assert x == y, key
    doc = json.loads((tmp_path / "re.json").read_text())
    assert doc["options"][0]["results_file"] == str(tmp_path / "a.json") and doc["options"][1]["results_file"] is None
    winner = [[line for line in r.output.splitlines() if line.startswith(("Winner", "No winner", "Verdicts"))]
              for r in (full, reuse)]
    assert winner[0] == winner[1] and len(winner[0]) == 2


@pytest.mark.parametrize("change, reason", [
    ("case", "none of the cases compared"),
    ("version", "written by grounding 0.0.0"),
    ("report", "draw each option's maps"),
    ("converge", "--converge"),
    ("garbled", "summary.grid_resistance_ohm is not a number"),    # regression (fuzzing): a traceback
])
def test_compare_solves_again_when_the_results_do_not_stand_for_the_case(tmp_path, variants, monkeypatch, change,
                                                                         reason):
    """Results are reused only for the same case bytes, the same tool version, a plain study, and outputs
    that need no maps; otherwise the case is solved and the terminal says why."""
    import grounding.options.runner as runner

    files = _option_files(tmp_path, variants, n=1)
    rec = tmp_path / "a.json"
    assert CliRunner().invoke(main, ["study", files[0], "--quiet", "--json", str(rec)]).exit_code == 0
    doc = json.loads(rec.read_text())
    if change == "case":
        with open(files[0], "a") as f:
            f.write("# edited after the study\n")
    elif change == "version":
        doc["tool"]["version"] = "0.0.0"
    elif change == "garbled":
        doc["summary"]["grid_resistance_ohm"] = "x"
    elif change == "converge":
        doc["diagnostics"]["convergence"] = {"converged": True, "rounds": []}
    rec.write_text(json.dumps(doc))
    solved = []
    real = runner.run_options
    monkeypatch.setattr(runner, "run_options", lambda cases, **kw: solved.append(len(cases)) or real(cases, **kw))
    extra = ["--report", str(tmp_path / "r.pdf")] if change == "report" else []
    res = CliRunner().invoke(main, ["compare", *files, "--results", str(rec), "--quiet", *extra])
    assert res.exit_code == 0, res.output
    assert solved == [1]
    note = [line for line in res.output.splitlines() if line.startswith(str(rec))]
    assert len(note) == 1 and "not reused" in note[0] and reason in note[0], res.output


def test_compare_refuses_a_results_file_that_is_not_one_in_one_line(tmp_path, variants):
    files = _option_files(tmp_path, variants, n=1)
    bad = tmp_path / "bad.json"
    bad.write_text('{"format": 1, "summary": [}')
    res = CliRunner().invoke(main, ["compare", *files, "--results", str(bad), "--quiet"])
    assert res.exit_code == 2
    lines = res.output.strip().splitlines()
    assert len(lines) == 1 and "bad.json" in lines[0] and "not JSON" in lines[0], res.output


def test_design_command_writes_a_case_that_studies(tmp_path, sweep_file):
    out = tmp_path / "chosen.yaml"
    res = CliRunner().invoke(main, ["design", str(sweep_file), "--by", "cost", "--out", str(out), "--quiet"])
    assert res.exit_code == 0, res.output
    case = load_case(out)
    r = run_study(case, estimate_error=False)
    assert r.touch_ok and r.step_ok


def test_sweep_command_plot_and_csv(tmp_path, sweep_file):
    res = CliRunner().invoke(main, ["sweep", str(sweep_file), "--plot", str(tmp_path / "t.png"),
                                    "--csv", str(tmp_path / "t.csv"), "--quiet"])
    assert res.exit_code == 0, res.output
    assert "options pass every criterion" in res.output
    rows = [r for r in (tmp_path / "t.csv").read_text().splitlines() if not r.startswith("#")]
    assert len(rows) == 1 + 8


@pytest.mark.parametrize("block,message", [
    ("sweep:\n  grid.spacing: []\n", "sweep.grid.spacing must be a non-empty list"),
    ("sweep:\n  rods.layout: [zigzag]\n", "values must be one of none, corners, perimeter"),
    ("sweep:\n  grid.depth: {from: 1, to: 0.5, step: 0.1}\n", "is empty"),
    ("sweep:\n  electrodes.grid[0].depth: [1]\n", "sweep.electrodes.grid[0].depth"),
    ("sweep:\n  grid.depth: [-1]\n", "sweep.grid.depth values must be numbers > 0 (m), got -1"),
    ("sweep:\n  grid.spacing: [0]\n", "sweep.grid.spacing values must be numbers > 0 (m), got 0"),
    ("sweep:\n  surface_layer.thickness: [5]\n", "model it as a soil layer (in sweep option "
                                                    "surface_layer.thickness=5)"),
])
def test_bad_sweeps_are_located(tmp_path, block, message):
    path = tmp_path / "bad.yaml"
    path.write_text(SWEEP.split("sweep:")[0] + block)
    with pytest.raises(CaseError) as info:
        load_variants(path)
    assert message in str(info.value)
    assert str(info.value).startswith(f"{path}:")


def test_soil_scenarios_sweep(tmp_path):
    """Named soil scenarios: each option gets its soil block; wetter soil gives lower Rg."""
    text = SWEEP.split("sweep:")[0] + ("sweep:\n  soil:\n    dry: {resistivity: 400}\n"
                                       "    wet: {layers: [{resistivity: 80, thickness: 1.0}, {resistivity: 150}]}\n")
    path = tmp_path / "soil.yaml"
    path.write_text(text)
    v = load_variants(path)
    assert [x.label for x in v] == ["soil=dry", "soil=wet"]
    assert v[0].case.soil.layers[0].resistivity == 400 and len(v[1].case.soil.layers) == 2
    r = run_options([x.case for x in v], estimate_error=False)
    assert r[1].grid_resistance < r[0].grid_resistance


def test_design_by_cost_needs_prices(tmp_path):
    path = tmp_path / "nocost.yaml"
    path.write_text(SWEEP.replace("costs: {conductor_per_m: 40, rod_per_m: 30, rod_each: 100, surface_layer_per_m2: 5, "
                                  "currency: EUR}\n", ""))
    res = CliRunner().invoke(main, ["design", str(path), "--by", "cost", "--quiet"])
    assert res.exit_code == 2 and "needs unit prices" in res.output


def test_rod_count_sweep(tmp_path):
    """rods.count: corners first, then spread evenly round the perimeter nodes of the first grid."""
    path = tmp_path / "rods.yaml"
    path.write_text(SWEEP.split("sweep:")[0] + "sweep:\n  grid.meshes: [[4, 4]]\n  rods.count: [0, 2, 4, 8]\n")
    v = load_variants(path)
    counts = [len(x.case.electrodes.rods) for x in v]
    assert counts == [0, 2, 4, 8]
    tops = {(r.top[0], r.top[1]) for r in v[3].case.electrodes.rods}
    assert {(0, 0), (20, 0), (20, 16), (0, 16)} <= tops and len(tops) == 8
    bad = tmp_path / "bad.yaml"
    bad.write_text(SWEEP.split("sweep:")[0] + "sweep:\n  rods.count: [99]\n")
    with pytest.raises(CaseError, match="do not fit on the 8 perimeter nodes"):
        load_variants(bad)


@pytest.mark.parametrize("rng, message", [
    ("{from: 1, to: 10, step: 1e-300}", "use a larger step"),
    ("{from: 1, to: 10, count: 100000000}", "whole number from 1 to"),
    ("{from: 1, to: .inf, step: 1}", "finite numbers"),
])
def test_runaway_sweep_ranges_refused_quickly(tmp_path, rng, message):
    """Regression (fuzzing): a tiny step or a huge count hung the sweep expansion."""
    path = tmp_path / "s.yaml"
    path.write_text(SWEEP.replace("grid.spacing: [10, 5]", f"grid.spacing: {rng}"))
    with pytest.raises(CaseError, match=message):
        load_variants(path)


def test_third_party_metal_is_not_counted_as_earthing_material():
    """The fence demos add a fence (wire and posts) and a 100 mm water main as separate electrodes to the same grid
    as the uniform demo: the layout's material and rod count are the grid's alone."""
    from grounding.case.load import load_case
    from grounding.options.quantities import geometry_quantities
    root = Path(__file__).resolve().parents[1] / "cases"
    plain = geometry_quantities(load_case(root / "kestrel-bend-uniform.yaml"))
    for name in ("fence-isolated", "fence-bonded"):
        q = geometry_quantities(load_case(root / f"kestrel-bend-{name}.yaml"))
        assert (q.conductor_length_m, q.rod_count, q.rod_length_m) == (plain.conductor_length_m, plain.rod_count,
                                                                       plain.rod_length_m)
        assert q.mass_kg == pytest.approx(plain.mass_kg, rel=1e-12)
