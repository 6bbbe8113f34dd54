"""The study pipeline and its Python API: case → geometry → soil → assembly → solve → surface → safety, then the
soil uncertainty carried to the results.

>>> from grounding import load_case, run_study          # doctest: +SKIP
>>> result = run_study(load_case("cases/kestrel-bend-uniform.yaml"))
>>> result.grid_resistance, result.ground_potential_rise"""

from __future__ import annotations

from dataclasses import replace

from ..case.model import Case
from .conditions import Progress, UnitStudy, combine_scenarios, solve_geometry, solve_key, study_conditions
from .result import StudyResult
from .uncertainty import propagate_soil_uncertainty

__all__ = ["run_study", "solve_geometry", "solve_key", "combine_scenarios", "UnitStudy"]


def run_study(case: Case, progress: Progress | None = None, estimate_error: bool = True,
              unit: UnitStudy | None = None, screen_drop: bool = True, uncertainty: bool = True,
              cache=None) -> StudyResult:
    """Run a whole study: the case as written, every scenario of it, and its soil uncertainty.

    With scenarios, the result is the case as written with ``scenarios`` holding every scenario's result
    (itself first) and the touch, step and mesh checks replaced by the governing (least margin) scenario's;
    a criterion passes only if it passes in every scenario. Scenarios share the solve where the soil,
    geometry, surface zones and map are equal (see :class:`~grounding.study.conditions.SolveKey`).

    Parameters
    ----------
    case : Case
        A validated case (see :func:`grounding.load_case`).
    progress : callable, optional
        Called as progress(stage, fraction) during long stages.
    estimate_error : bool
        Also solve at twice the segment length to estimate the discretisation error of Rg.
    unit : UnitStudy, optional
        A solution of the same geometry (``solve_key`` equal) to re-use instead of solving again.
    screen_drop : bool
        Screen the potential drop along the metal (equipotential studies).
    uncertainty : bool
        Carry the soil's parameter uncertainty (``soil.uncertainty`` or a fitted sounding's covariance) to the
        results (:func:`~grounding.study.uncertainty.propagate_soil_uncertainty`); ``result.uncertainty`` is
        None without it or when the case gives no uncertainty.
    cache : SolveCache, optional
        Solves (and soil-uncertainty sensitivities) kept between runs (:class:`~grounding.study.cache.SolveCache`);
        None: solve everything.

    Returns
    -------
    StudyResult
    """
    result = study_conditions(case, progress, estimate_error, unit, screen_drop, cache)
    if not uncertainty:
        return result
    return replace(result, uncertainty=propagate_soil_uncertainty(result, progress, cache))
