"""Discretisation-error estimates of Rg and of the worst voltages from a second solve at twice the segment length."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from ..case.model import Case
from ..operators.potential import SurfacePotential
from ..solve.equipotential import Solution
from ..solve.run import solve_case
from ..surface.results import SAFETY_FACTOR, Extreme, SurfaceResult, ZoneExtremes
from ..surface.steps import step_at
from .result import DiscretizationError

#: Convergence order of Rg and the voltages in the segment length: first order for horizontal conductors
#: (measured on grids, see DEVELOPERS.md), about 0.4 for rods (measured on a lone 3 m rod in uniform soil: the
#: differences between successive halvings from 1 m to 0.125 m shrink by 1.31–1.39, p = 0.39–0.47).
CONVERGENCE_ORDER = 1.0
ROD_CONVERGENCE_ORDER = 0.4


def richardson_factor(fine_segments: int, coarse_segments: int, rod_share: float) -> tuple[float, float, float]:
    """(factor, ratio, order): Richardson's estimate of the error of the fine value is |fine − coarse| · factor,
    factor = Fs/(r^p − 1) (Roache's grid convergence index, Fs = SAFETY_FACTOR), with r the refinement ratio
    actually made (segment counts: pieces shorter than the coarse length do not split, so r is often below 2) and
    p the order, interpolated between the grid's and the rods' by the rods' share of the leakage current (0–1)."""
    r = fine_segments / coarse_segments
    p = CONVERGENCE_ORDER - (CONVERGENCE_ORDER - ROD_CONVERGENCE_ORDER) * float(np.clip(rod_share, 0.0, 1.0))
    return SAFETY_FACTOR / (r ** p - 1.0), r, p


def estimate_discretization_error(case: Case, fine: Solution, fine_segments: int,
                                  surface: SurfaceResult | None = None,
                                  rod_share: float = 0.0,
                                  solve=solve_case) -> tuple[DiscretizationError, SurfaceResult | None]:
    """Second solve at twice the segment length (about an eighth of the cost) and Richardson's estimate
    of the error of Rg (:func:`richardson_factor`); with the unit ``surface`` of the fine solve, also the worst
    voltages of every zone re-evaluated at the same points from the coarse solve (``Extreme.segment_check``).
    ``rod_share``: the rods' share of the leakage current, which sets the order; ``solve``: called as
    ``solve(case)`` like :func:`~grounding.solve.run.solve_case` (a run's shared coarse solves)."""
    coarse_case = replace(case, discretization=replace(case.discretization,
                                                            max_segment=2 * case.discretization.max_segment))
    segments, kernel, coarse, _ = solve(coarse_case)
    if segments.base_count >= fine_segments:
        return DiscretizationError(coarse.resistance, None, None,
                                   "not estimated: doubling max_segment does not change the segments "
                                   "(conductor pieces between junctions are already shorter)"), surface
    factor, ratio, order = richardson_factor(fine_segments, segments.base_count, rod_share)
    est = abs(fine.resistance - coarse.resistance) * factor
    error = DiscretizationError(coarse.resistance, est, est / fine.resistance, "", ratio, order)
    if surface is None:
        return error, None
    potential = SurfacePotential(segments, coarse.currents_per_volt, kernel)
    gpr_ratio = coarse.resistance / fine.resistance           # the coarse GPR per fine GPR at the same IG
    step_len = case.surface.step_distance

    def check(ext: Extreme | None, kind: str) -> Extreme | None:
        if ext is None:
            return None
        xy = np.array([[ext.x, ext.y]])
        if kind == "step":
            value = step_at(potential, ext.x, ext.y, step_len)
        elif coarse.metal is not None:
            value = float(np.abs(coarse.metal.main_metal(xy)[0] - potential(xy)[0]))
        else:
            value = 1.0 - float(potential(xy)[0])
        return replace(ext, segment_check=gpr_ratio * value, richardson=factor)

    zones = tuple(ZoneExtremes(check(z.touch, "touch"), check(z.step, "step"), check(z.mesh, "mesh"))
                  for z in surface.zones)
    return error, replace(surface, zones=zones)
