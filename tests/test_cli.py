"""Command line: study and check, the JSON keys, and one-line errors with exit code 2."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from click.testing import CliRunner

from grounding.cautions import CAUTIONS
from grounding.cli import main

ROOT = Path(__file__).resolve().parents[1]
SMALL = """\
format: 1
title: small yard
soil: {resistivity: 150}
surface_layer: {resistivity: 2500, thickness: 0.1}
fault: {current: 4000, split_factor: 0.7, x_over_r: 10, clearing_time: 0.3}
electrodes:
  grids: [{origin: [0, 0], size: [20, 15], meshes: [4, 3], depth: 0.6, diameter: 0.01}]
  rods: [{top: [0, 0, 0.6], length: 3, diameter: 0.016}]
surface: {margin: 2, resolution: 1.0}
probes: [[2.5, 2.5]]
"""


@pytest.fixture
def small_case(tmp_path):
    path = tmp_path / "small.yaml"
    path.write_text(SMALL)
    return path


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def test_study_prints_summary_and_cautions(small_case):
    res = run("study", small_case, "--quiet")
    assert res.exit_code == 0, res.output
    for text in ("Grid resistance Rg", "Ground potential rise", "Touch voltage", "Step voltage", "Mesh voltage",
                 "Sverak", "Required area", "PASS" if "PASS" in res.output else "FAIL"):
        assert text in res.output
    assert CAUTIONS[1].split()[0] in res.output and "licensed professional engineer" in res.output


JSON_SUMMARY_KEYS = {"grid_resistance_ohm", "ground_potential_rise_v", "grid_current_a", "decrement_factor",
                     "max_touch_voltage_v", "max_touch_at", "max_step_voltage_v", "max_step_at",
                     "max_mesh_voltage_v", "tolerable_touch_voltage_v", "tolerable_step_voltage_v", "touch_ok",
                     "step_ok", "segments", "electrode_length_m"}


def test_study_json_has_stable_keys(small_case, tmp_path):
    out = tmp_path / "res.json"
    res = run("study", small_case, "--json", out, "--quiet")
    assert res.exit_code == 0, res.output
    doc = json.loads(out.read_text())
    assert doc["format"] == 1
    assert JSON_SUMMARY_KEYS <= set(doc["summary"])
    assert set(doc["probes"][0]) == {"x", "y", "surface_potential_v", "touch_voltage_v"}
    assert set(doc["simplified"]) >= {"grid_resistance_ohm", "mesh_voltage_v", "step_voltage_v"}
    assert set(doc["conductor"]) >= {"required_area_mm2", "actual_area_mm2", "ok"}
    assert set(doc["diagnostics"]) >= {"assemble_s", "solve_s", "surface_s", "discretization_error"}
    assert doc["cautions"] == list(CAUTIONS)
    s = doc["summary"]
    assert s["ground_potential_rise_v"] == pytest.approx(s["grid_current_a"] * s["grid_resistance_ohm"], rel=1e-5)
    assert s["touch_ok"] == (s["max_touch_voltage_v"] <= s["tolerable_touch_voltage_v"])
    # each value is printed to 6 significant digits: the difference of two is good to their rounding (≤ 5e-6 of
    # each, so 1e-5 of the GPR), not to 1e-5 of the (smaller) difference
    assert doc["probes"][0]["touch_voltage_v"] == pytest.approx(
        s["ground_potential_rise_v"] - doc["probes"][0]["surface_potential_v"], abs=1e-5 * s["ground_potential_rise_v"])


def test_check_validates_only(small_case):
    res = run("check", small_case)
    assert res.exit_code == 0 and "valid" in res.output


def test_bad_input_is_one_line_exit_2(tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text(SMALL.replace("length: 3,", "length: -3,"))
    res = subprocess.run([sys.executable, "-m", "grounding.cli", "study", str(bad)], capture_output=True, text=True)
    assert res.returncode == 2
    assert "Traceback" not in res.stderr
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1
    assert lines[0] == f"error: {bad}:8: electrodes.rods[0].length must be > 0 m, got -3"


@pytest.mark.parametrize("old, new", [("electrodes:\n", "electrodes:\n  material: [60, 22.5]\n"),
                                      ("rods: [{top", "rods: [{material: [1, 2], top")])
def test_material_that_is_not_a_name_is_refused_in_one_line(tmp_path, old, new):
    """Regression (fuzzing): a list given as a material name ended in the safety net (TypeError)."""
    text = SMALL.replace(old, new, 1)
    bad = tmp_path / "bad.yaml"
    bad.write_text(text)
    res = run("check", bad)
    assert res.exit_code == 2 and "is not in the material table" in res.output, res.output


def test_too_large_discretisation_refused_with_size(tmp_path):
    big = tmp_path / "big.yaml"
    big.write_text(SMALL.replace("size: [20, 15], meshes: [4, 3]", "size: [3000, 3000], meshes: [30, 30]")
                   + "discretization: {max_segment: 0.1}\n")
    res = run("check", big)
    assert res.exit_code == 2
    assert "segments" in res.output and "GiB" in res.output and "max_segment of at least" in res.output


def test_json_not_written_on_failure(tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text(SMALL.replace("resistivity: 150", "resistivity: -1"))
    out = tmp_path / "res.json"
    out.write_text("previous")
    res = run("study", bad, "--json", out)
    assert res.exit_code == 2
    assert out.read_text() == "previous"


def test_unwritable_json_path_is_a_clean_error(small_case, tmp_path):
    res = run("study", small_case, "--json", tmp_path / "no-such-folder" / "r.json", "--quiet")
    assert res.exit_code == 2 and "does not exist" in res.output


@pytest.mark.parametrize("name", ["kestrel-bend-uniform.yaml", "kestrel-bend-two-layer.yaml", "kestrel-bend-seasons.yaml",
                                  "kestrel-bend-fence-isolated.yaml", "kestrel-bend-fence-bonded.yaml",
                                  "kestrel-bend-steel-lead.yaml"])
def test_demo_cases_are_valid(name):
    res = run("check", ROOT / "cases" / name)
    assert res.exit_code == 0, res.output


def test_oversized_map_refused(tmp_path):
    big = tmp_path / "map.yaml"
    big.write_text(SMALL.replace("surface: {margin: 2, resolution: 1.0}", "surface: {margin: 500, resolution: 0.2}"))
    res = run("check", big)
    assert res.exit_code == 2 and "points" in res.output and "resolution of at least" in res.output


@pytest.mark.parametrize("name", ["kestrel-bend-uniform.yaml", "kestrel-bend-fitted.yaml"])
def test_demo_studies_run(name, tmp_path):
    """The README's demo command (and the fitted-soil demo) run end to end."""
    res = run("study", ROOT / "cases" / name, "--quiet", "--json", tmp_path / "r.json")
    assert res.exit_code == 0, res.output
    doc = json.loads((tmp_path / "r.json").read_text())
    assert doc["summary"]["grid_resistance_ohm"] > 0


def test_profile_and_site_from_case(tmp_path):
    from grounding.case.load import parse_case
    from grounding.study.pipeline import run_study

    text = SMALL.replace("surface: {margin: 2, resolution: 1.0}",
                         "surface: {margin: 2, resolution: 1.0, profile: [[0, 7.5], [20, 7.5]]}") + "site: Testfield\n"
    r = run_study(parse_case(text), estimate_error=False)
    assert r.case.site == "Testfield"
    p = r.surface.profile
    assert (p.x[0], p.y[0], p.x[-1], p.y[-1]) == (0.0, 7.5, 20.0, 7.5)
    assert p.distance[-1] == pytest.approx(20.0)


@pytest.mark.parametrize("option", ["--json", "--csv", "--report"])
def test_output_onto_the_case_file_is_refused_and_the_case_survives(small_case, option, monkeypatch):
    """Regression (fuzzing): an output path pointing at the case file, directly or via ./, overwrote it."""
    before = small_case.read_bytes()
    monkeypatch.chdir(small_case.parent)
    for target in (str(small_case), f"./{small_case.name}", f"../{small_case.parent.name}/{small_case.name}"):
        res = run("study", small_case.name, "--quiet", option, target)
        assert res.exit_code == 2 and "is the input file" in res.output, res.output
        assert len(res.output.strip().splitlines()) == 1
    assert small_case.read_bytes() == before


def test_soil_plot_onto_the_readings_is_refused(tmp_path):
    src = ROOT / "cases" / "kestrel-bend-wenner.csv"
    readings = tmp_path / "r.csv"
    readings.write_bytes(src.read_bytes())
    res = run("soil", readings, "--layers", "1", "--json", readings)
    assert res.exit_code == 2 and "is the input file" in res.output
    assert readings.read_bytes() == src.read_bytes()


def test_one_path_for_two_outputs_is_refused(small_case, tmp_path):
    out = tmp_path / "same.out"
    res = run("study", small_case, "--quiet", "--json", out, "--csv", out)
    assert res.exit_code == 2 and "two outputs" in res.output and not out.exists()


def test_check_of_a_bad_sweep_prints_only_the_refusal(tmp_path):
    """Regression (fuzzing): `check` printed "valid" and the notes, then refused a sweep option (exit 2, several
    lines); the options are validated before anything is printed."""
    text = (ROOT / "cases" / "kestrel-bend-sweep.yaml").read_text().replace(
        "  grid.depth: [0.5, 0.8]", "  grid.depth: [0.5, 20000]")
    path = tmp_path / "s.yaml"
    path.write_text(text)
    res = run("check", path)
    lines = [line for line in res.output.strip().splitlines() if line.strip()]
    assert res.exit_code == 2 and len(lines) == 1 and "valid" not in lines[0], res.output
    # a number in exponent form without a dot (text to YAML 1.1) is a number in a sweep list too
    path.write_text(text.replace("grid.depth: [0.5, 20000]", "grid.depth: [5e-1, 0.8]"))
    assert run("check", path).exit_code == 0


# fuzz findings: inputs that once ended in an internal error now get one line and exit 2
@pytest.mark.parametrize("old, new, command, words", [
    ("  traverse: east", "  traverse: {a: 1}", "check", "soil.traverse must be the name of one traverse"),
    ("  traverse: east", "  traverse: [a, b]", "check", "got a list"),
])
def test_fitted_soil_traverse_not_a_name_is_refused(tmp_path, old, new, command, words):
    text = (ROOT / "cases" / "kestrel-bend-fitted.yaml").read_text()
    assert old in text
    (tmp_path / "kestrel-bend-wenner.csv").write_text((ROOT / "cases" / "kestrel-bend-wenner.csv").read_text())
    path = tmp_path / "f.yaml"
    path.write_text(text.replace(old, new))
    run = subprocess.run([sys.executable, "-m", "grounding.cli", command, str(path)], capture_output=True, text=True)
    assert run.returncode == 2 and len(run.stderr.strip().splitlines()) == 1 and words in run.stderr, run.stderr


def test_sweep_setting_without_a_name_is_refused(tmp_path):
    text = (ROOT / "cases" / "kestrel-bend-sweep.yaml").read_text()
    path = tmp_path / "s.yaml"
    path.write_text(text[:text.index("sweep:")] + "sweep:\n  '': [1, 2]\n")
    run = subprocess.run([sys.executable, "-m", "grounding.cli", "sweep", str(path)], capture_output=True, text=True)
    assert run.returncode == 2 and len(run.stderr.strip().splitlines()) == 1 and "sweep has a setting named ''" in run.stderr


def test_absurd_map_resolution_is_refused_before_allocating(tmp_path):
    text = (ROOT / "cases" / "kestrel-bend-uniform.yaml").read_text()
    path = tmp_path / "r.yaml"
    path.write_text(text.replace("resolution: 0.5", "resolution: 1e-9", 1))
    run = subprocess.run([sys.executable, "-m", "grounding.cli", "check", str(path)], capture_output=True, text=True,
                         timeout=60)
    assert run.returncode == 2 and len(run.stderr.strip().splitlines()) == 1, run.stderr
    assert "use a resolution of at least" in run.stderr and "MemoryError" not in run.stderr


def test_probe_outside_the_map_is_said(tmp_path):
    """A probe far from the map gets a note on its touch voltage."""
    text = (ROOT / "cases" / "kestrel-bend-uniform.yaml").read_text()
    path = tmp_path / "p.yaml"
    path.write_text(text + "\nprobes:\n  - [5000, 5000]\n" if "probes:" not in text else text.replace("probes:", "probes:\n  - [5000, 5000]", 1))
    run = subprocess.run([sys.executable, "-m", "grounding.cli", "study", str(path), "--quiet", "--no-cache"],
                         capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    assert "lies outside the surface map" in " ".join(run.stdout.split())


def test_burial_depth_in_millimetres_is_refused(tmp_path):
    """depth: 600 (millimetres given as metres) is refused in one line naming the key and the fix."""
    text = (ROOT / "cases" / "kestrel-bend-uniform.yaml").read_text()
    assert "depth: 0.6, diameter: 0.0124}" in text
    path = tmp_path / "d.yaml"
    path.write_text(text.replace("depth: 0.6, diameter: 0.0124}", "depth: 600, diameter: 0.0124}", 1))
    run = subprocess.run([sys.executable, "-m", "grounding.cli", "check", str(path)], capture_output=True, text=True)
    assert run.returncode == 2 and len(run.stderr.strip().splitlines()) == 1
    assert "grids[0].depth = 600 m is deeper than 50 m" in run.stderr and "0.6 for 600 mm" in run.stderr


@pytest.mark.parametrize("rod, words", [("{top: [0, 0, 0.5], length: 3000, diameter: 0.016}",
                                         "rods[0].length = 3000 m is implausibly long for a rod"),
                                        ("{top: [0, 0, 500], length: 3, diameter: 0.016}",
                                         "rods[0].top[2] = 500 m is deeper than 50 m")])
def test_rod_length_and_top_in_millimetres_are_refused(tmp_path, rod, words):
    """A rod 3000 m long or with its top 500 m deep (millimetres given as metres) is refused in one line."""
    path = tmp_path / "r.yaml"
    path.write_text("format: 1\nsoil: {resistivity: 100}\nfault: {current: 1000, clearing_time: 0.5}\n"
                    f"electrodes:\n  rods: [{rod}]\n")
    run = subprocess.run([sys.executable, "-m", "grounding.cli", "check", str(path)], capture_output=True, text=True)
    assert run.returncode == 2 and len(run.stderr.strip().splitlines()) == 1
    assert words in run.stderr and "mm" in run.stderr


@pytest.mark.parametrize("soil, words, absent", [
    ("soil: ", "soil must be a mapping of keys, got nothing (an empty value)", "NoneType"),
    ("soil: {resistivity: " + str(list(range(1000))) + "}", "got [0, 1, 2,", "999"),
])
def test_refusals_speak_case_file_words_and_stay_short(tmp_path, soil, words, absent):
    """Refusals name what a value is in the words of a case file (not Python's type names), and quote at most 80
    characters of it (a list of 1 000 numbers is cut)."""
    path = tmp_path / "c.yaml"
    path.write_text(f"format: 1\n{soil}\nfault: {{current: 1000}}\n"
                    "electrodes: {rods: [{top: [0, 0, 0.5], length: 3, diameter: 0.016}]}\n")
    run = subprocess.run([sys.executable, "-m", "grounding.cli", "check", str(path)], capture_output=True, text=True)
    assert run.returncode == 2 and len(run.stderr.strip().splitlines()) == 1
    assert words in run.stderr and absent not in run.stderr and len(run.stderr) < 400


def test_case_file_of_50000_rods_is_refused_at_once(tmp_path):
    """Fuzz finding: 50 000 rods kept `check` busy for a minute; a file that long is refused before parsing (the
    message names the line count, which only the early check gives)."""
    path = tmp_path / "rods.yaml"
    rows = "".join(f"    - {{top: [{i % 250 * 2}, {i // 250 * 2}, 0.5], length: 3, diameter: 0.016}}\n" for i in range(50_000))
    path.write_text("format: 1\nsoil: {resistivity: 100}\nfault: {current: 1000}\nelectrodes:\n  rods:\n" + rows)
    run = subprocess.run([sys.executable, "-m", "grounding.cli", "check", str(path)], capture_output=True, text=True)
    assert run.returncode == 2 and len(run.stderr.strip().splitlines()) == 1
    assert "has 50,006 lines; a case file is at most 20,000 lines" in run.stderr
