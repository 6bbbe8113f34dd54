"""Golden results: every number a study computes for the demo cases and a few feature cases, stored once.

A stored result is the study's results document (``results_dict`` at full precision, as the command line's
``study --json`` computes it, soil uncertainty included) with the machine-dependent entries removed (timings,
peak memory, file paths), plus a fingerprint of the surface maps (every 4th point of each map axis, and the
sum, sum of squares, minimum and maximum over the whole map). ``tests/test_golden.py`` re-runs every case and
compares every number; ``python -m tests.golden.regenerate`` rewrites the stored files (a change to them is
a reviewed commit of its own whose message says why the numbers moved).
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
HERE = Path(__file__).resolve().parent
RESULTS = HERE / "results"

#: Relative tolerance where the computation is deterministic (dense Cholesky solves, direct sums).
DETERMINISTIC_RTOL = 1e-9
#: Relative tolerance of studies solved iteratively (conjugate gradients stop at a relative residual of 1e-6;
#: the same arithmetic repeats to the last digit, but a change of summation order may move the iterate by
#: up to the stopping residual times the condition of the small-value entries).
ITERATIVE_RTOL = 1e-6
#: Absolute floor of every comparison in SI units (1 nV, 1 nA, 1 nm, 1 nΩ): numbers that should be zero
#: (a coordinate on an axis, a current per volt that cancels) differ by rounding there.
ATOL = 1e-9
#: Relative tolerance of a case whose soil is fitted to a sounding: the fit is the minimum of a least-squares
#: misfit, which is quadratic there and so locates its argument only to about the square root of the machine
#: epsilon (√2.2e-16 ≈ 1.5e-8; Press et al., Numerical Recipes, 3rd ed., §10.1), and the fit's covariance
#: comes from the Jacobian at that point, which scipy's least_squares takes by forward differences with a step
#: of about √ε. Rounding of another CPU's BLAS kernels moved the fitted layers by 1.9e-8 and the fitted
#: parameters' σ by 2.3e-7 (an AVX-512 machine against the stored results).
FITTED_RTOL = 1e-6


@dataclass(frozen=True)
class GoldenCase:
    """A case whose results are stored: name of the stored file, case path relative to the repository, tolerance."""

    name: str
    path: str
    rtol: float = DETERMINISTIC_RTOL


CASES = (
    GoldenCase("uniform", "cases/kestrel-bend-uniform.yaml"),
    GoldenCase("two-layer", "cases/kestrel-bend-two-layer.yaml"),
    GoldenCase("three-layer", "cases/kestrel-bend-three-layer.yaml"),
    GoldenCase("fitted", "cases/kestrel-bend-fitted.yaml", FITTED_RTOL),
    GoldenCase("fence-isolated", "cases/kestrel-bend-fence-isolated.yaml"),
    GoldenCase("fence-bonded", "cases/kestrel-bend-fence-bonded.yaml"),
    GoldenCase("seasons", "cases/kestrel-bend-seasons.yaml"),
    GoldenCase("steel-lead", "cases/kestrel-bend-steel-lead.yaml"),
    GoldenCase("sweep-base", "cases/kestrel-bend-sweep.yaml"),
    GoldenCase("en50522-small", "tests/golden/cases/en50522-small.yaml"),
    GoldenCase("separate-remote-floating", "tests/golden/cases/separate-remote-floating.yaml"),
    GoldenCase("iterative-two-layer", "tests/golden/cases/iterative-two-layer.yaml", ITERATIVE_RTOL),
)

#: Entries of the results document that depend on the machine or the run, not on the model.
VOLATILE = {("diagnostics", "assemble_s"), ("diagnostics", "solve_s"), ("diagnostics", "surface_s"),
            ("diagnostics", "peak_memory_mb"), ("uncertainty", "seconds")}


def run_case(case: GoldenCase):
    """The study of ``case`` as ``grounding study`` runs it (including soil uncertainty)."""
    from grounding import load_case
    from grounding.study.pipeline import run_study

    return run_study(load_case(ROOT / case.path))


def map_fingerprint(values: np.ndarray) -> dict:
    """Every 4th point of a map along both axes (NaN as None) and sum, sum of squares, min, max of the
    finite values, V."""
    finite = values[np.isfinite(values)]
    sample = values[::4, ::4]
    return {"sample": [[None if not math.isfinite(v) else float(v) for v in row] for row in sample.tolist()],
            "finite_points": int(finite.size), "sum": float(finite.sum()), "sum_of_squares": float((finite ** 2).sum()),
            "min": float(finite.min()) if finite.size else None, "max": float(finite.max()) if finite.size else None}


def golden_document(result) -> dict:
    """What is stored for one study: the full-precision results document and the map fingerprints."""
    from grounding.outputs.results_json import results_dict

    doc = results_dict(result, full_precision=True)
    for section, key in VOLATILE:
        if isinstance(doc.get(section), dict):
            doc[section].pop(key, None)
    for scenario in doc["scenarios"]:
        scenario.pop("scenario_s", None)
    # where each solve came from is kept (which conditions share one); its content key and the words quoting it
    # change with the tool's version, so they are left out
    for holder in [doc["diagnostics"]] + doc["scenarios"]:
        if isinstance(holder.get("solve"), dict):
            holder["solve"].pop("key", None)
            holder["solve"].pop("text", None)
    doc["case"]["file"] = Path(doc["case"]["file"]).name
    for entry in doc["case"]["inputs"]:
        entry["file"] = Path(entry["file"]).name
    doc = without_checkout_path(doc)
    s = result.surface
    doc["maps"] = {"x": [float(v) for v in s.x], "y": [float(v) for v in s.y],
                   "potential_v": map_fingerprint(s.potential), "touch_v": map_fingerprint(s.touch),
                   "step_v": map_fingerprint(s.step)}
    return doc


def without_checkout_path(doc):
    """``doc`` with the checkout's own folder removed from every string (a readings file named in the soil fit
    and in the uncertainty source is stored relative to the repository, so a checkout elsewhere compares equal)."""
    prefix = str(ROOT) + "/"
    if isinstance(doc, dict):
        return {k: without_checkout_path(v) for k, v in doc.items()}
    if isinstance(doc, list):
        return [without_checkout_path(v) for v in doc]
    if isinstance(doc, str):
        return doc.replace(prefix, "")
    return doc


def stored_path(case: GoldenCase) -> Path:
    return RESULTS / f"{case.name}.json"


def differences(stored, fresh, rtol: float, atol: float = ATOL, path: str = "") -> list[str]:
    """Every place where ``fresh`` differs from ``stored``: numbers beyond ``rtol``·max(|a|, |b|) + ``atol``,
    anything else not equal (strings, booleans, None, keys, lengths)."""
    out: list[str] = []
    if isinstance(stored, dict) and isinstance(fresh, dict):
        for key in sorted(set(stored) | set(fresh)):
            where = f"{path}.{key}" if path else str(key)
            if key not in fresh:
                out.append(f"{where}: missing from the fresh result")
            elif key not in stored:
                out.append(f"{where}: new in the fresh result")
            else:
                out.extend(differences(stored[key], fresh[key], rtol, atol, where))
    elif isinstance(stored, list) and isinstance(fresh, list):
        if len(stored) != len(fresh):
            out.append(f"{path}: {len(stored)} items stored, {len(fresh)} now")
        else:
            for i, (a, b) in enumerate(zip(stored, fresh)):
                out.extend(differences(a, b, rtol, atol, f"{path}[{i}]"))
    elif _is_number(stored) and _is_number(fresh):
        a, b = float(stored), float(fresh)
        if abs(a - b) > rtol * max(abs(a), abs(b)) + atol:
            out.append(f"{path}: stored {a!r}, now {b!r} (relative {abs(a - b) / max(abs(a), abs(b)):.2e})")
    elif stored != fresh:
        out.append(f"{path}: stored {stored!r}, now {fresh!r}")
    return out


def _is_number(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool)


def write(case: GoldenCase, doc: dict) -> None:
    RESULTS.mkdir(parents=True, exist_ok=True)
    stored_path(case).write_text(json.dumps(doc, indent=1, ensure_ascii=False, allow_nan=False) + "\n")


def read(case: GoldenCase) -> dict:
    return json.loads(stored_path(case).read_text())
