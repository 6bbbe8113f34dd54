"""Discretisation-error estimates of Rg and of the worst voltages from a second solve at twice the segment length."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from ..case.model import Case
from ..operators.potential import SurfacePotential
from ..solve.equipotential import Solution
from ..solve.run import solve_case
from ..surface.results import Extreme, SurfaceResult, ZoneExtremes
from ..surface.steps import step_at
from .result import DiscretizationError

#: Observed convergence order of Rg in the segment length (measured on grids, see DEVELOPERS.md).
CONVERGENCE_ORDER = 1.0


def estimate_discretization_error(case: Case, fine: Solution, fine_segments: int,
                                  surface: SurfaceResult | None = None) -> tuple[DiscretizationError, SurfaceResult | None]:
    """Second solve at twice the segment length (about an eighth of the cost) and Richardson's estimate
    of the error of Rg; with the unit ``surface`` of the fine solve, also the worst voltages of every zone
    re-evaluated at the same points from the coarse solve (``Extreme.segment_check``)."""
    coarse_case = replace(case, discretization=replace(case.discretization,
                                                            max_segment=2 * case.discretization.max_segment))
    segments, kernel, coarse, _ = solve_case(coarse_case)
    if len(segments) == fine_segments:
        return DiscretizationError(coarse.resistance, None, None,
                                   "not estimated: doubling max_segment does not change the segments "
                                   "(conductor pieces between junctions are already shorter)"), surface
    est = abs(fine.resistance - coarse.resistance) / (2 ** CONVERGENCE_ORDER - 1)
    error = DiscretizationError(coarse.resistance, est, est / fine.resistance)
    if surface is None:
        return error, None
    potential = SurfacePotential(segments, coarse.currents_per_volt, kernel)
    ratio = coarse.resistance / fine.resistance               # the coarse GPR per fine GPR at the same IG
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
        return replace(ext, segment_check=ratio * value)

    zones = tuple(ZoneExtremes(check(z.touch, "touch"), check(z.step, "step"), check(z.mesh, "mesh"))
                  for z in surface.zones)
    return error, replace(surface, zones=zones)
