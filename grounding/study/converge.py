"""``--converge``: halve the segments and the map spacing until the worst voltages settle."""

from __future__ import annotations

import time
from dataclasses import replace
from typing import Callable

from ..case.model import Case
from ..errors import ModelTooLargeError
from ..geometry.segments import segment
from ..solve.policy import check_model_size
from .cache import MemoryCache
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


#: Growth of a round's time when the segments halve and the map spacing halves, before two rounds were measured
#: (twice the segments and four times the map points; measured on the demos and the benchmark yard: 3–5 ×).
FIRST_GROWTH = 5.0


def focus(case: Case, result: StudyResult) -> Case:
    """The case with only the scenarios that govern touch, step or mesh in ``result`` (the as-written condition
    always runs). The governing checks of the narrowed case are those of the whole (each is the least margin over
    the conditions, and the condition that has it is kept), so the refinement rounds need only these."""
    if not case.scenarios:
        return case
    names = {c.scenario for c in (result.touch_check, result.step_check, result.mesh_check) if c.scenario}
    return replace(case, scenarios=tuple(sc for sc in case.scenarios if sc.name in names))


def converge_study(case: Case, tolerance: float = 0.01, max_rounds: int = 5,
                   progress: Progress | None = None, cache=None, max_time: float | None = None,
                   say: Callable[[str], None] | None = None) -> tuple[StudyResult, Convergence]:
    """Halve the segment length and the map spacing together until the governing worst touch, step and
    mesh voltages change by less than ``tolerance`` (relative) between rounds.

    Each round is planned before it runs: its segments and map points are checked against memory and the map
    limit, and its time predicted from the last round's (the growth measured between the last two rounds, or
    FIRST_GROWTH); a round that would not fit, or would end after ``max_time`` seconds from the start, is not run
    and the note says which and why. Rounds after the first refine only the conditions that govern (see
    :func:`focus`); the result returned is the last round reached, studied in full (every scenario, the
    discretisation-error estimate, the soil uncertainty). Each round is a study with its error estimate, so that the
    final study reuses the last round's solves (``cache``, or one held in memory). ``say`` receives one line per
    round (plan and outcome).
    """
    start = time.perf_counter()
    cache = cache if cache is not None else MemoryCache()     # the final study reuses the last round's solves
    say = say or (lambda _text: None)
    h, res = case.discretization.max_segment, case.surface.resolution
    t0 = time.perf_counter()
    current = run_study(case, uncertainty=False, cache=cache)
    times = [time.perf_counter() - t0]
    narrowed = focus(case, current)
    rounds = [_round(current)]
    say(f"converge round 1: max_segment {h:g} m, map {res:g} m, {rounds[0].segments:,} segments: {times[0]:.1f} s")
    note, converged = "", False
    while len(rounds) < max_rounds:
        if progress:
            progress("converge", len(rounds) / max_rounds)
        trial = refined(narrowed, h / 2, res / 2)
        k = len(rounds) + 1
        try:
            n = len(segment(trial))
            check_model_size(trial, segment(trial))
        except ModelTooLargeError as exc:
            note = f"stopped before round {k}: {exc}"
            break
        growth = times[-1] / times[-2] if len(times) >= 2 and times[-2] > 0 else FIRST_GROWTH
        predicted = times[-1] * max(growth, 1.0)
        elapsed = time.perf_counter() - start
        if max_time is not None and elapsed + 1.5 * predicted > max_time:   # the final full study needs time too
            note = (f"stopped before round {k} ({h / 2:g} m segments, {n:,} of them; map {res / 2:g} m): predicted "
                    f"{predicted:.0f} s from the last round's {times[-1]:.1f} s, which with the final study would end "
                    f"after the time allowed ({max_time:g} s; {elapsed:.0f} s used)")
            break
        say(f"converge round {k}: max_segment {h / 2:g} m, map {res / 2:g} m, {n:,} segments, predicted {predicted:.0f} s")
        h, res = h / 2, res / 2
        t0 = time.perf_counter()
        current = run_study(trial, uncertainty=False, cache=cache)
        times.append(time.perf_counter() - t0)
        rounds.append(_round(current))
        change = _change(rounds[-2], rounds[-1])
        say(f"converge round {k}: {times[-1]:.1f} s, worst voltages changed by {change * 100:.2f} %")
        if change < tolerance:
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
    elif len(rounds) > 1:
        note += (f"; reached max_segment {h:g} m, map {res:g} m, where the worst voltages changed by "
                 f"{_change(rounds[-2], rounds[-1]) * 100:.2f} % from the round before")
    else:
        note += f"; the result is that of the case's own max_segment {h:g} m, map {res:g} m (not refined)"
    conv = Convergence(tuple(rounds), converged, tolerance, note)
    return replace(final, diagnostics=replace(final.diagnostics, convergence=conv)), conv
