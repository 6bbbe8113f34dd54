"""Solves kept between runs (grounding.study.cache) and solves shared between the conditions of one run: a reused
solve gives exactly the results of a fresh one, an entry that cannot be trusted is ignored with a note, and the
outputs say where each solve came from."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from dataclasses import replace

import numpy as np
import pytest

from grounding.case.load import parse_case
from grounding.study.cache import MAGIC, SolveCache, encode, entry_key
from grounding.study.conditions import solve_key
from grounding.study.pipeline import run_study

CASE = """\
format: 1
title: kept solves
soil: {layers: [{resistivity: 250, thickness: 2.0}, {resistivity: 70}], uncertainty: {resistivity: 0.1, thickness: 0.2}}
surface_zones:
  - {name: rock, polygon: [[-1, -1], [21, -1], [21, 16], [-1, 16]], resistivity: 3000, thickness: 0.1}
fault: {current: 8000, split_factor: 0.6, clearing_time: 0.5}
electrodes:
  grids: [{origin: [0, 0], size: [20, 15], meshes: [4, 3], depth: 0.5, diameter: 0.01}]
  rods: [{top: [0, 0, 0.5], length: 3, diameter: 0.016}]
discretization: {max_segment: 1.0}
surface: {resolution: 1.0, margin: 3}
"""


def _numbers(r):
    """The results a reviewer reads, with the map."""
    return [r.grid_resistance, r.ground_potential_rise, r.touch_check.worst.value, r.step_check.worst.value,
            r.mesh_check.worst.value, r.touch_check.limit, float(np.nansum(r.surface.potential)),
            float(np.nansum(r.surface.step))]


@pytest.fixture
def store(tmp_path):
    s = SolveCache(tmp_path / "solves")
    yield s
    s.close()


def test_second_run_reuses_the_solve_and_gives_the_same_results(store):
    case = parse_case(CASE)
    first = run_study(case, cache=store)
    again = run_study(case, cache=store)
    fresh = run_study(case)
    assert first.diagnostics.solve.origin == "solved"
    assert again.diagnostics.solve.origin == "cache"
    assert again.diagnostics.solve.key == first.diagnostics.solve.key
    assert _numbers(again) == _numbers(first) == _numbers(fresh)               # exactly: the same float64 arrays
    np.testing.assert_array_equal(again.segment_currents, fresh.segment_currents)
    assert again.uncertainty.extra_solves == 0 and first.uncertainty.extra_solves > 0
    assert again.uncertainty.quantities["touch"].sigma == first.uncertainty.quantities["touch"].sigma


def test_edits_of_limits_reuse_the_solve_edits_of_soil_do_not(store):
    case = parse_case(CASE)
    run_study(case, cache=store, uncertainty=False)
    rock = parse_case(CASE.replace("resistivity: 3000", "resistivity: 2000"))       # covering: limits only
    heavier = replace(case, criteria=replace(case.criteria, body_weight=50))
    r_rock = run_study(rock, cache=store, uncertainty=False)
    r_body = run_study(heavier, cache=store, uncertainty=False)
    assert r_rock.diagnostics.solve.origin == r_body.diagnostics.solve.origin == "cache"
    def rock_limit(r):
        return next(z.tolerable_touch for z in r.safety.criteria[0].zones if z.name == "rock")
    assert rock_limit(r_rock) < rock_limit(run_study(case, uncertainty=False))    # judged afresh
    wetter = parse_case(CASE.replace("resistivity: 250", "resistivity: 240"))
    assert run_study(wetter, cache=store, uncertainty=False).diagnostics.solve.origin == "solved"


def test_corrupt_entry_is_ignored_with_a_note_and_removed(store):
    case = parse_case(CASE)
    first = run_study(case, cache=store, uncertainty=False)
    key = first.diagnostics.solve.key
    value = bytearray(store.store.get(key))
    value[-100] ^= 0xFF                                                        # one flipped byte in the archive
    store.store.set(key, bytes(value))
    again = run_study(case, cache=store, uncertainty=False)
    assert again.diagnostics.solve.origin == "solved"
    assert any("ignored and removed: it fails its checksum" in w for w in again.warnings)
    assert _numbers(again) == _numbers(first)
    assert run_study(case, cache=store, uncertainty=False).diagnostics.solve.origin == "cache"   # stored afresh


def test_entry_of_another_version_is_not_trusted(store, monkeypatch):
    import grounding.study.cache as C
    case = parse_case(CASE)
    first = run_study(case, cache=store, uncertainty=False)
    key = first.diagnostics.solve.key
    unit_parts = C.decode(store.store.get(key), key, case)
    from grounding.study.conditions import UnitStudy
    monkeypatch.setattr(C, "TOOL_VERSION", "0.0.1")
    old = encode(key, UnitStudy(*unit_parts))                                  # the same key, written by 0.0.1
    monkeypatch.undo()
    store.store.set(key, old)
    again = run_study(case, cache=store, uncertainty=False)
    assert again.diagnostics.solve.origin == "solved"
    assert any("another version (0.0.1" in w for w in again.warnings)


def test_pickled_values_are_refused_never_unpickled(store):
    case = parse_case(CASE)
    key = entry_key(solve_key(case), True, True)
    store.store.set(key, {"a pickled": "dict"})                                # diskcache would pickle this
    parts, note = store.get(key, case)
    assert parts is None and "pickled value (refused)" in note
    assert store.store.get(key, default=None, read=False) is None or key not in store.store
    assert not store.get(key, case)[1]                                         # removed: a plain miss now


def test_value_is_checksummed_npz():
    """The stored value: the magic bytes, the SHA-256 of the payload, then numpy's own archive."""
    case = parse_case(CASE)
    from grounding.study.conditions import solve_geometry
    unit = solve_geometry(case)
    blob = encode("k", unit)
    assert blob.startswith(MAGIC)
    import hashlib
    import io
    payload = blob[len(MAGIC) + 32:]
    assert hashlib.sha256(payload).digest() == blob[len(MAGIC):len(MAGIC) + 32]
    archive = np.load(io.BytesIO(payload), allow_pickle=False)
    np.testing.assert_array_equal(archive["currents"], unit.solution.currents_per_volt)
    np.testing.assert_array_equal(archive["potential"], unit.surface.potential)


def test_scaled_scenarios_equal_resolved_ones():
    """A scenario that only changes the fault current shares the solve; its results equal a study of that case on
    its own (relative 1e-9)."""
    text = CASE + "scenarios:\n  - name: now\n  - name: later\n    fault: {current: 12000}\n"
    shared = run_study(parse_case(text), uncertainty=False)
    later = shared.scenarios[1]
    assert later.diagnostics.solve.origin == "shared" and later.diagnostics.solve.shared_with == "now"
    alone = run_study(parse_case(CASE.replace("current: 8000", "current: 12000")), uncertainty=False)
    assert alone.diagnostics.solve.origin == "solved"
    np.testing.assert_allclose(_numbers(later), _numbers(alone), rtol=1e-9)


def _cli(*args, env):
    return subprocess.run([sys.executable, "-m", "grounding.cli", *args], capture_output=True, text=True, env=env)


def test_command_line_reuse_no_cache_clear_and_two_writers(tmp_path):
    case = tmp_path / "c.yaml"
    case.write_text(CASE)
    env = {**os.environ, "GROUNDING_CACHE_DIR": str(tmp_path / "cache")}
    # two processes solving the same case into the same store at once
    procs = [subprocess.Popen([sys.executable, "-m", "grounding.cli", "study", str(case), "--quiet", "--json",
                               str(tmp_path / f"w{i}.json")], env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                              text=True) for i in range(2)]
    for p in procs:
        _, err = p.communicate(timeout=300)
        assert p.returncode == 0, err
    docs = [json.loads((tmp_path / f"w{i}.json").read_text()) for i in range(2)]
    assert docs[0]["summary"] == docs[1]["summary"]
    run = _cli("study", str(case), "--quiet", "--json", str(tmp_path / "r.json"), env=env)
    assert run.returncode == 0, run.stderr
    doc = json.loads((tmp_path / "r.json").read_text())
    assert doc["diagnostics"]["solve"]["origin"] == "cache"
    assert doc["diagnostics"]["solve"]["text"].startswith("solve reused (key ")
    assert doc["summary"] == docs[0]["summary"]
    assert "Solve: solve reused" in run.stdout
    info = _cli("cache", "info", env=env)
    assert info.returncode == 0 and "Entries  2" in info.stdout                # the solve and the sensitivities
    nocache = _cli("study", str(case), "--quiet", "--no-cache", "--json", str(tmp_path / "n.json"), env=env)
    assert nocache.returncode == 0
    n = json.loads((tmp_path / "n.json").read_text())
    assert n["diagnostics"]["solve"]["origin"] == "solved" and n["summary"] == doc["summary"]
    cleared = _cli("cache", "clear", env=env)
    assert cleared.returncode == 0 and "Removed 2 entries" in cleared.stdout
    assert "Entries  0" in _cli("cache", "info", env=env).stdout


def test_the_version_an_entry_needs_changes_with_the_source(tmp_path):
    """Entries are tied to the code that wrote them, not only to the version number: one changed source file
    (e.g. a better search of the worst step) gives another tool_version, so the old results are not reused."""
    import grounding.study.cache as C
    pkg = tmp_path / "pkg"
    (pkg / "surface").mkdir(parents=True)
    (pkg / "surface" / "steps.py").write_text("STEP = 1\n")
    before = C.tool_version(pkg)
    assert before == C.tool_version(pkg) and before.startswith(C.__version__ + "+")
    (pkg / "surface" / "steps.py").write_text("STEP = 2\n")
    assert C.tool_version(pkg) != before
    assert C.TOOL_VERSION == C.tool_version()
