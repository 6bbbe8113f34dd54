"""Soil uncertainty carried to the verdict: σ of Rg, GPR and the worst voltages, and the probability that
each criterion's limit is exceeded.

Model (first-order, stated in every output): the soil parameters p (layer resistivities and
thicknesses) are log-normal, log p ~ N(log p̂, C), with C the sounding fit's covariance of the
log-parameters or, from the user's relative 1-σ per parameter, diagonal with σ² = log(1 + s²). Each
result y (Rg, GPR, the worst touch, step and mesh voltages, and the ratio of each worst voltage to its
own limit, which also moves with the top-soil resistivity) is taken as log-normal with
log y ≈ log ŷ + Σ_j S_j (log p_j − log p̂_j); the sensitivities S_j = ∂ log y / ∂ log p_j come from
forward differences, one extra solve per soil parameter re-using the geometry. Then
σ(log y)² = Sᵀ C S and P(limit exceeded) = Φ(log(ŷ/L) / σ(log ratio)).

Worst voltages are maxima over the map, so they may switch place between solves; the differences take
that into account (each solve searches its own worst point).
"""

from __future__ import annotations

import math
import time
from dataclasses import replace

import numpy as np
from scipy.stats import norm

from ..case.model import Case, Layer, Soil
from .conditions import study_conditions
from .result import QuantityUncertainty, SoilUncertaintyResult, StudyResult

#: Step of the forward differences in log-parameter space (≈ 3 %).
LOG_STEP = 0.03
#: Quantities the propagation reports, as (name, function of a result).
QUANTITIES = ("grid_resistance", "ground_potential_rise", "touch", "step", "mesh")


def soil_parameters(soil: Soil) -> tuple[list[str], np.ndarray]:
    """Names and log-values of the soil parameters: log ρ1 … log ρn, then log h1 … log h(n−1)."""
    names = [f"ρ{i}" for i in range(1, len(soil.layers) + 1)] + [f"h{i}" for i in range(1, len(soil.layers))]
    x = [math.log(l.resistivity) for l in soil.layers] + [math.log(l.thickness) for l in soil.layers[:-1]]
    return names, np.array(x)


def soil_from_parameters(soil: Soil, x: np.ndarray) -> Soil:
    """The soil with parameters exp(x) (same order as :func:`soil_parameters`)."""
    n = len(soil.layers)
    layers = tuple(Layer(float(math.exp(x[i])), float(math.exp(x[n + i])) if i < n - 1 else None) for i in range(n))
    return replace(soil, layers=layers)


def parameter_covariance(case: Case) -> tuple[np.ndarray, str] | None:
    """Covariance of the log soil parameters and where it came from; None when the case gives none."""
    soil = case.soil
    n = len(soil.layers)
    p = 2 * n - 1
    if soil.uncertainty is not None:
        u = soil.uncertainty
        rel = np.array([u.resistivity] * n + [u.thickness] * (n - 1))
        return np.diag(np.log1p(rel) ** 2), (f"user-given relative 1-σ: resistivity {u.resistivity:g}"
                                             + (f", thickness {u.thickness:g}" if n > 1 else ""))
    fit = case.soil_fit
    if fit is not None and fit.best.covariance is not None and fit.best.covariance.shape == (p, p):
        return np.array(fit.best.covariance), f"the sounding fit's Jacobian covariance ({fit.readings.source})"
    return None


def _values(r: StudyResult) -> dict[str, float | None]:
    def worst(check):
        return None if check.worst is None else check.worst.value

    def ratio(check):
        return None if check.worst is None or check.limit is None else check.worst.value / check.limit

    return {"grid_resistance": r.grid_resistance, "ground_potential_rise": r.ground_potential_rise,
            "touch": worst(r.touch_check), "step": worst(r.step_check), "mesh": worst(r.mesh_check),
            "touch_ratio": ratio(r.touch_check), "step_ratio": ratio(r.step_check), "mesh_ratio": ratio(r.mesh_check)}


def _plain(case: Case) -> Case:
    """The case as written, without scenarios (the propagation is about the soil of the case itself)."""
    return replace(case, scenarios=())


def propagate_soil_uncertainty(result: StudyResult, progress=None) -> SoilUncertaintyResult | None:
    """σ and exceedance probabilities of a study's results from its soil's parameter uncertainty.

    Costs one extra solve per soil parameter (2n − 1 for n layers). Returns None when the case gives no
    uncertainty (no ``soil.uncertainty`` and no fitted sounding with a resolved covariance).
    """
    got = parameter_covariance(result.case)
    if got is None:
        return None
    cov, source = got
    t0 = time.perf_counter()
    case = _plain(result.case)
    names, x0 = soil_parameters(case.soil)
    base = _values(result.scenarios[0] if result.scenarios else result)
    sens: dict[str, list[float]] = {k: [] for k in base}
    for j in range(len(x0)):
        x = x0.copy()
        x[j] += LOG_STEP
        r = study_conditions(replace(case, soil=soil_from_parameters(case.soil, x)), estimate_error=False, screen_drop=False)
        v = _values(r)
        for k in base:
            if base[k] is None or v[k] is None or base[k] <= 0 or v[k] <= 0:
                sens[k].append(float("nan"))
            else:
                sens[k].append((math.log(v[k]) - math.log(base[k])) / LOG_STEP)
        if progress:
            progress("uncertainty", (j + 1) / len(x0))
    out = {}
    for k in QUANTITIES:
        s = np.array(sens[k])
        if base[k] is None or not np.all(np.isfinite(s)):
            out[k] = QuantityUncertainty(base[k], None, None, None, tuple(s.tolist()))
            continue
        sl = float(math.sqrt(max(s @ cov @ s, 0.0)))
        prob = None
        if k in ("touch", "step", "mesh"):
            sr = np.array(sens[f"{k}_ratio"])
            if base[f"{k}_ratio"] is not None and np.all(np.isfinite(sr)):
                slr = float(math.sqrt(max(sr @ cov @ sr, 0.0)))
                q = math.log(base[f"{k}_ratio"])
                prob = float(norm.cdf(q / slr)) if slr > 0 else float(q > 0)
        out[k] = QuantityUncertainty(base[k], base[k] * math.expm1(sl), sl, prob, tuple(s.tolist()))
    return SoilUncertaintyResult(source, tuple(names), tuple(np.sqrt(np.diag(cov)).tolist()), out, len(x0),
                                 time.perf_counter() - t0)


def _sample_row(case: Case, x: np.ndarray) -> dict:
    """One Monte Carlo sample: the study's values with the soil parameters ``x``."""
    return _values(study_conditions(replace(case, soil=soil_from_parameters(case.soil, x)), estimate_error=False,
                             screen_drop=False))


def sample_worst(case: Case, samples: int, seed: int = 0, workers: int = 1) -> dict[str, np.ndarray]:
    """Monte Carlo reference: the results of ``samples`` studies with soil parameters drawn from the case's
    log-normal model (used to check the first-order propagation); ``workers`` local processes share the
    samples (the same draws and results in the same order as one process)."""
    got = parameter_covariance(case)
    if got is None:
        raise ValueError("the case gives no soil uncertainty")
    cov, _ = got
    case = _plain(case)
    _, x0 = soil_parameters(case.soil)
    rng = np.random.default_rng(seed)
    draws = rng.multivariate_normal(x0, cov, size=samples)
    if workers > 1:
        from concurrent.futures import ProcessPoolExecutor

        with ProcessPoolExecutor(max_workers=workers) as pool:
            rows = list(pool.map(_sample_row, [case] * samples, draws, chunksize=max(1, samples // (4 * workers))))
    else:
        rows = [_sample_row(case, x) for x in draws]
    return {k: np.array([np.nan if r[k] is None else r[k] for r in rows]) for k in rows[0]}
