"""Property-based tests (hypothesis): valid cases study or are refused by a documented limit, with finite
and deterministic results; mutated cases are refused in one located line, quickly, never with another
exception. A short profile runs in the suite; HYPOTHESIS_PROFILE=long runs many more examples."""

from __future__ import annotations

import json
import math
import os
import time

import pytest

hypothesis = pytest.importorskip("hypothesis")
from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

from grounding.case.load import parse_case
from grounding.errors import CaseError, GroundingError
from grounding.geometry.segments import segment
from grounding.outputs.results_json import results_dict
from grounding.solve.policy import check_model_size
from grounding.study.pipeline import run_study

settings.register_profile("ci", max_examples=12, deadline=None, derandomize=True,
                          suppress_health_check=[HealthCheck.too_slow])
settings.register_profile("long", max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "ci"))

finite = dict(allow_nan=False, allow_infinity=False)


@st.composite
def valid_cases(draw) -> str:
    """A valid case file: one grid with optional corner rods, uniform or two-layer soil."""
    size = (draw(st.floats(5, 40, **finite)), draw(st.floats(5, 40, **finite)))
    meshes = (draw(st.integers(1, 4)), draw(st.integers(1, 4)))
    depth = draw(st.floats(0.3, 1.2, **finite))
    if draw(st.booleans()):
        soil = f"{{resistivity: {draw(st.floats(10, 5000, **finite)):.6g}}}"
    else:
        soil = (f"{{layers: [{{resistivity: {draw(st.floats(10, 3000, **finite)):.6g}, "
                f"thickness: {draw(st.floats(0.5, 5, **finite)):.6g}}}, {{resistivity: {draw(st.floats(10, 3000, **finite)):.6g}}}]}}")
    rods = draw(st.integers(0, 2))
    rod_text = "".join(f"\n    - {{top: [{x:.6g}, 0, {depth:.6g}], length: {draw(st.floats(1, 5, **finite)):.6g}, "
                       f"diameter: 0.016}}" for x in (0.0, size[0])[:rods])
    return (f"format: 1\ntitle: property\nsoil: {soil}\n"
            f"fault: {{current: {draw(st.floats(100, 20000, **finite)):.6g}, "
            f"clearing_time: {draw(st.floats(0.1, 1.0, **finite)):.6g}}}\n"
            f"electrodes:\n  grids: [{{origin: [0, 0], size: [{size[0]:.6g}, {size[1]:.6g}], "
            f"meshes: [{meshes[0]}, {meshes[1]}], depth: {depth:.6g}, diameter: 0.01}}]\n"
            + (f"  rods:{rod_text}\n" if rods else "")
            + f"discretization: {{max_segment: {draw(st.floats(1.5, 4, **finite)):.6g}}}\n"
            f"surface: {{resolution: {draw(st.floats(1.5, 3, **finite)):.6g}, margin: 2}}\n")


def _numbers(doc) -> list[float]:
    if isinstance(doc, dict):
        return [x for v in doc.values() for x in _numbers(v)]
    if isinstance(doc, list):
        return [x for v in doc for x in _numbers(v)]
    return [doc] if isinstance(doc, float) else []


@given(valid_cases())
@pytest.mark.slow
def test_valid_cases_study_with_finite_deterministic_results(text):
    case = parse_case(text)
    try:
        check_model_size(case, segment(case))
    except GroundingError:
        return                                               # a documented limit, refused in one line
    a = results_dict(run_study(case, estimate_error=False))
    b = results_dict(run_study(case, estimate_error=False))
    for doc in (a, b):
        doc["diagnostics"] = {k: v for k, v in doc["diagnostics"].items() if not k.endswith("_s")}
    assert json.dumps(a, sort_keys=True, allow_nan=False) == json.dumps(b, sort_keys=True, allow_nan=False)
    assert all(math.isfinite(x) for x in _numbers(a))
    s = a["summary"]
    assert s["grid_resistance_ohm"] > 0 and s["max_touch_voltage_v"] >= 0
    assert s["touch_ok"] in (True, False)


MUTATIONS = ("text", "negative", "huge", "tiny", "list", "mapping", "drop", "unknown", "null", "bool")


@st.composite
def mutated_cases(draw) -> str:
    """A valid case with one value or key broken."""
    text = draw(valid_cases())
    lines = text.splitlines()
    kind = draw(st.sampled_from(MUTATIONS))
    import re
    numbers = [(i, m) for i, line in enumerate(lines) for m in re.finditer(r"(?<![\w.])-?\d+(\.\d+)?(e[-+]?\d+)?", line)]
    if kind in ("drop", "unknown"):
        i = draw(st.integers(0, len(lines) - 1))
        if kind == "drop":
            del lines[i]
        else:
            lines.insert(i + 1, "bogus_key: 1" if not lines[i].startswith(" ") else "  bogus_key: 1")
        return "\n".join(lines) + "\n"
    i, m = draw(st.sampled_from(numbers))
    value = {"text": "abc", "negative": "-" + m.group(0).lstrip("-"), "huge": "1e39", "tiny": "1e-300",
             "list": "[1, 2]", "mapping": "{a: 1}", "null": "null", "bool": "true"}[kind]
    lines[i] = lines[i][:m.start()] + value + lines[i][m.end():]
    return "\n".join(lines) + "\n"


@given(mutated_cases())
def test_mutated_cases_are_refused_in_one_line_quickly(text):
    t0 = time.perf_counter()
    try:
        case = parse_case(text, file="fuzz.yaml")
        check_model_size(case, segment(case))
    except GroundingError as exc:
        message = str(exc)
        assert "\n" not in message and message.strip()
        if isinstance(exc, CaseError):
            assert message.startswith("fuzz.yaml")
    assert time.perf_counter() - t0 < 5.0
