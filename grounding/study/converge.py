"""``--converge``: halve the segments and the map spacing until the worst voltages settle."""

from __future__ import annotations

from dataclasses import replace
from typing import Callable

from ..case.model import Case
from ..errors import ModelTooLargeError
from ..geometry.segments import segment
from ..solve.policy import check_model_size
from .pipeline import run_study
from .result import Convergence, ConvergenceRound, StudyResult

Progress = Callable[[str, float], None]


def refined(case: Case, max_segment: float, resolution: float) -> Case:
    """The case (and every scenario of it) with another segment length and map spacing, m."""
    def one(c: Case) -> Case:
        return replace(c, discretization=replace(c.discretization, max_segment=max_segment), surface=replace(c.surface, resolution=resolution))
    return replace(one(case), scenarios=tuple(replace(sc, case=one(sc.case)) for sc in case.scenarios))


def _round(r: StudyResult) -> ConvergenceRound:
    def v(check):
        return None if check.worst is None else check.worst.value
    return ConvergenceRound(r.case.discretization.max_segment, r.case.surface.resolution, len(r.segments),
                            v(r.touch_check), v(r.step_check), v(r.mesh_check))


def _change(a: ConvergenceRound, b: ConvergenceRound) -> float:
    """Largest relative change of the worst voltages between two rounds (inf when one is missing)."""
    out = 0.0
    for x, y in ((a.touch, b.touch), (a.step, b.step), (a.mesh, b.mesh)):
        if x is None and y is None:
            continue
        if x is None or y is None:
            return float("inf")
        out = max(out, abs(y - x) / max(abs(y), 1e-300))
    return out


def converge_study(case: Case, tolerance: float = 0.01, max_rounds: int = 5,
                   progress: Progress | None = None, cache=None) -> tuple[StudyResult, Convergence]:
    """Halve the segment length and the map spacing together until the governing worst touch, step and
    mesh voltages change by less than ``tolerance`` (relative) between rounds.

    Before each refinement the model size is checked against memory and the map-point limit; when the
    next round would not fit, the study stops there and says so. The result returned is the last round,
    studied with its discretisation-error estimate.
    """
    h, res = case.discretization.max_segment, case.surface.resolution
    current = run_study(case, estimate_error=False, screen_drop=False, uncertainty=False, cache=cache)
    rounds = [_round(current)]
    note, converged = "", False
    while len(rounds) < max_rounds:
        if progress:
            progress("converge", len(rounds) / max_rounds)
        trial = refined(case, h / 2, res / 2)
        try:
            check_model_size(trial, segment(trial))
        except ModelTooLargeError as exc:
            note = f"stopped before round {len(rounds) + 1}: {exc}"
            break
        h, res = h / 2, res / 2
        current = run_study(trial, estimate_error=False, screen_drop=False, uncertainty=False, cache=cache)
        rounds.append(_round(current))
        if _change(rounds[-2], rounds[-1]) < tolerance:
            converged = True
            break
    else:
        note = f"not settled within {max_rounds} rounds"
    if progress:
        progress("converge", 1.0)
    final = run_study(refined(case, h, res), progress, cache=cache)
    if converged:
        note = (f"settled: the worst voltages changed by {_change(rounds[-2], rounds[-1]) * 100:.2f} % from "
                f"max_segment {2 * h:g} m, map {2 * res:g} m to {h:g} m, {res:g} m")
    conv = Convergence(tuple(rounds), converged, tolerance, note)
    return replace(final, diagnostics=replace(final.diagnostics, convergence=conv)), conv
