"""The study pipeline and its Python API: case → geometry → soil → assembly → solve → surface → safety, then the
soil uncertainty carried to the results.

>>> from grounding import load_case, run_study          # doctest: +SKIP
>>> result = run_study(load_case("cases/kestrel-bend-uniform.yaml"))
>>> result.grid_resistance, result.ground_potential_rise"""

from __future__ import annotations

from dataclasses import replace

from ..case.model import Case
from .conditions import (
    CoarseSolves,
    Progress,
    UnitStudy,
    combine_scenarios,
    solve_geometry,
    solve_key,
    study_conditions,
)
from .result import StudyResult
from .uncertainty import propagate_soil_uncertainty

__all__ = ["run_study", "solve_geometry", "solve_key", "combine_scenarios", "UnitStudy"]


def run_study(case: Case, progress: Progress | None = None, estimate_error: bool = True,
              unit: UnitStudy | None = None, screen_drop: bool = True, uncertainty: bool = True,
              cache=None) -> StudyResult:
    """Run a whole study: the case as written, every scenario of it (:func:`~grounding.study.conditions.study_conditions`,
    whose parameters these are), and its soil uncertainty.

    Parameters
    ----------
    case, progress, estimate_error, unit, screen_drop, cache
        As for :func:`~grounding.study.conditions.study_conditions` (``cache``: solves and soil-uncertainty
        sensitivities kept between runs, a :class:`~grounding.study.cache.SolveCache`; None solves everything).
    uncertainty : bool
        Carry the soil's parameter uncertainty (``soil.uncertainty`` or a fitted sounding's covariance) to the
        results (:func:`~grounding.study.uncertainty.propagate_soil_uncertainty`); ``result.uncertainty`` is
        None without it or when the case gives no uncertainty.

    Returns
    -------
    StudyResult
    """
    coarse = CoarseSolves()             # the error estimate's coarse solve is the uncertainty's base on large models
    result = study_conditions(case, progress, estimate_error, unit, screen_drop, cache, coarse)
    if not uncertainty:
        return result
    return replace(result, uncertainty=propagate_soil_uncertainty(result, progress, cache, coarse))
