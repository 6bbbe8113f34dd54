"""Soil uncertainty carried to the verdict: σ of Rg, GPR and the worst voltages, and the probability that
each criterion's limit is exceeded.

Model (first-order, stated in every output): the soil parameters p (layer resistivities and
thicknesses) are log-normal, log p ~ N(log p̂, C), with C the sounding fit's covariance of the
log-parameters or, from the user's relative 1-σ per parameter, diagonal with σ² = log(1 + s²). Each
result y (Rg, GPR, the worst touch, step and mesh voltages, and the ratio of each worst voltage to its
own limit, which also moves with the top-soil resistivity) is taken as log-normal with
log y ≈ log ŷ + Σ_j S_j (log p_j − log p̂_j). Then σ(log y)² = Sᵀ C S and P(limit exceeded) =
Φ(log(ŷ/L) / σ(log ratio)).

The sensitivities S_j = ∂ log y / ∂ log p_j are forward differences: one solve per soil parameter at the
study's own discretisation, the worst voltages evaluated again at the study's worst points and a small
neighbourhood of each (a maximum is stationary in position, so to first order its value moves with the field
at its own place; :mod:`grounding.surface.revisit`), not a new search of the map. The limits' own dependence
on the top-soil resistivity (Cs, EN 50522's standing resistance) is differenced directly. One resistivity needs
no solve: the soil's Green's function is homogeneous of degree one in the resistivities (scale every ρ by s and
every potential at fixed current scales by s; Euler's theorem on homogeneous functions), so Σ_i S_ρi = 1 for Rg,
GPR and every voltage. That identity is used when nothing else sets the scale: not with conductor impedance (the
metal's own resistance does not scale) nor with a split factor from the fault-current paths (Sf moves with Rg).
``reference_sensitivities`` keeps the former method (a whole study, with its own search, per parameter) for
the tests; ``sample_worst`` is the Monte Carlo reference.
"""

from __future__ import annotations

import hashlib
import json
import math
import time
from dataclasses import replace

import numpy as np
from scipy.stats import norm

from ..case.model import Case, Layer, Soil
from ..geometry.segments import segment
from ..operators.potential import SurfacePotential
from ..safety.site import zone_limits
from ..solve.run import solve_case
from ..surface.revisit import step_again, touch_again
from .cache import cacheable
from .conditions import CoarseSolves, grid_current, study_conditions, zoning
from .result import QuantityUncertainty, SoilUncertaintyResult, StudyResult

#: Step of the forward differences in log-parameter space (≈ 3 %).
LOG_STEP = 0.03
#: A passing criterion whose probability of exceeding its limit is above this is flagged marginal.
UNLIKELY = 0.05
#: Above this many segments the sensitivities are taken at a coarser level (a base solve and one per parameter
#: there): a sensitivity S = ∂ log y / ∂ log p is a ratio of changes and moves with the discretisation far less
#: than y itself. Smaller models are cheap enough at their own level.
COARSE_FROM = 2_000
#: The coarser level is four times the segment length where that model keeps at least this many segments, else
#: twice. Measured: σ(log) at 4 h against the study's own level within 2 % on the benchmark yard (1 977 of 5 779
#: segments; Rg 0.2 %, touch 1.8 %, step 0.4 %) and within 1.2 % on the fitted demo (237 of 733);
#: tests/test_uncertainty.py compares the levels on a grid.
COARSE_FLOOR = 1_500
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


def propagate_soil_uncertainty(result: StudyResult, progress=None, cache=None,
                               coarse: CoarseSolves | None = None) -> SoilUncertaintyResult | None:
    """σ and exceedance probabilities of a study's results from its soil's parameter uncertainty.

    Costs one solve per soil parameter but one (2n − 2 for n layers; none for uniform soil) where the
    resistivities set the only scale, else one per parameter, and no new search of the map (see the module
    docstring); none when ``cache`` (a :class:`~grounding.study.cache.SolveCache`) holds the sensitivities of the
    same solve and worst points; ``coarse``: the run's coarser solves (the error estimate's solve at twice the
    segment length is the base of the sensitivities on large models). Returns None when the case gives no uncertainty (no ``soil.uncertainty`` and no
    fitted sounding with a resolved covariance).
    """
    got = parameter_covariance(result.case)
    if got is None:
        return None
    cov, source = got
    t0 = time.perf_counter()
    base_result = result.scenarios[0] if result.scenarios else result
    case = _plain(base_result.case)
    names, x0 = soil_parameters(case.soil)
    watch = _Watch(base_result)
    factor = sensitivity_level(case, len(base_result.electrical.segments))
    words = {2: "twice", 4: "four times"}
    level = (f"sensitivities at {words[factor]} the segment length ({factor * case.discretization.max_segment:g} m"
             + (", rods' ends not refined)" if not _coarsened(case, factor).discretization.refine_rod_ends else ")")
             if factor > 1 else "sensitivities at the study's own segment length")
    key = None
    if cache is not None and base_result.diagnostics.solve is not None and not cacheable(case):
        key = sensitivity_key(base_result.diagnostics.solve.key, factor, watch, case)
    if progress:
        progress("uncertainty", 0.0)
    sens, solves = (cache.get_sensitivities(key) if key else None), 0
    if sens is None:
        sens, solves = _field_sensitivities(case, base_result, watch, factor, progress, coarse or solve_case)
        if key:
            cache.put_sensitivities(key, sens)
    else:
        level += "; kept from an earlier run"
    limit_sens = _limit_sensitivities(watch, case, x0)
    out = {}
    for k in QUANTITIES:
        s = np.array(sens[k], float)
        value = watch.searched[k]
        if value is None or not np.all(np.isfinite(s)):
            out[k] = QuantityUncertainty(value, None, None, None, tuple(s.tolist()))
            continue
        sl = float(math.sqrt(max(s @ cov @ s, 0.0)))
        ratio = watch.ratio(k) if k in ("touch", "step", "mesh") else None
        prob = None if ratio is None else _exceedance(ratio, s - limit_sens[k], cov)
        out[k] = QuantityUncertainty(value, value * math.expm1(sl), sl, prob, tuple(s.tolist()))
    shared = tuple((r.scenario, _shared_probabilities(r, watch, sens, cov, x0))
                   for r in result.scenarios[1:] if _same_solve(r, base_result))
    return SoilUncertaintyResult(source, tuple(names), tuple(np.sqrt(np.diag(cov)).tolist()), out, solves,
                                 time.perf_counter() - t0, level=level, scope=scope_of(result),
                                 scenario_probabilities=shared)


def _same_solve(r: StudyResult, base: StudyResult) -> bool:
    """Whether a scenario has the as-written case's solve (its voltages are that solve's, scaled)."""
    a, b = r.diagnostics.solve, base.diagnostics.solve
    return a.key == b.key if a is not None and b is not None else r.case.soil == base.case.soil


def _shared_probabilities(r: StudyResult, watch: "_Watch", sens: dict, cov: np.ndarray,
                          x0: np.ndarray) -> dict[str, float | None]:
    """P(limit exceeded) of a scenario with the as-written case's solve, per criterion: its voltages scale that
    solve's, so where its worst point is the same place in the same zone the voltage sensitivities are the same;
    its limits (another covering, weight or time) are differenced with the nudged soils as the case's are. None where
    its worst point is elsewhere (the sensitivities there were not taken) or it has none."""
    mine = _Watch(r)
    limit_sens = _limit_sensitivities(mine, _plain(r.case), x0)
    out: dict[str, float | None] = {}
    for k in ("touch", "step", "mesh"):
        ours, theirs = mine.checks[k], watch.checks[k]
        ratio = mine.ratio(k)
        same_place = (ours.worst is not None and theirs.worst is not None and ours.zone == theirs.zone
                      and math.hypot(ours.worst.x - theirs.worst.x, ours.worst.y - theirs.worst.y) <= 1e-6)
        out[k] = (_exceedance(ratio, np.array(sens[k], float) - limit_sens[k], cov)
                  if same_place and ratio is not None else None)
    return out


def _limit_sensitivities(watch: "_Watch", case: Case, x0: np.ndarray) -> dict[str, np.ndarray]:
    """∂ log limit / ∂ log p_j of the watched checks' zones, per criterion: the limits move with the top soil (Cs,
    EN 50522's standing resistance), differenced directly with each parameter nudged (no solve)."""
    base = watch.values(case, limits_only=True)
    nudged = []
    for j in range(len(x0)):
        x = x0.copy()
        x[j] += LOG_STEP
        nudged.append(watch.values(replace(case, soil=soil_from_parameters(case.soil, x)), limits_only=True))
    return {k: np.array([_log_difference(base[f"{k}_limit"], n[f"{k}_limit"]) for n in nudged])
            for k in ("touch", "step", "mesh")}


def _exceedance(ratio: float, sr: np.ndarray, cov: np.ndarray) -> float | None:
    """P(limit exceeded) = Φ(log(worst/limit) / σ) with σ² = srᵀ C sr, sr the sensitivities of log(worst/limit);
    None where a sensitivity is not finite."""
    if not np.all(np.isfinite(sr)):
        return None
    slr = float(math.sqrt(max(sr @ cov @ sr, 0.0)))
    q = math.log(ratio)
    return float(norm.cdf(q / slr)) if slr > 0 else float(q > 0)


def uncertain_passes(r: StudyResult) -> list[tuple[str, str, float]]:
    """(scenario, criterion, P) of every check that passes as computed but whose limit the soil uncertainty exceeds with
    a probability above UNLIKELY: the case as written and each scenario with its solve, each judged on its own check
    (a scenario with a thinner margin than the case's has the higher probability)."""
    u = r.uncertainty
    if u is None:
        return []
    base = r.scenarios[0] if r.scenarios else r
    by_name = {s.scenario: s for s in r.scenarios}
    conditions = [(base, {k: u.quantities[k].probability_exceeds_limit for k in ("touch", "step", "mesh")})]
    conditions += [(by_name[name], probs) for name, probs in u.scenario_probabilities if name in by_name]
    out = []
    for cond, probs in conditions:
        for name, check in (("touch", cond.touch_check), ("step", cond.step_check), ("mesh", cond.mesh_check)):
            p = probs.get(name)
            if check.ok and p is not None and p > UNLIKELY:
                out.append((cond.scenario, name, p))
    return out


def scope_of(result: StudyResult) -> str:
    """Which condition a propagation describes (the case as written) and what the other scenarios take from it, in
    words; "" without scenarios. A scenario with the same solve only scales the voltages or moves the limits, so it
    has the same relative σ but its own probability (see ``_shared_probabilities``); one with another soil is not
    propagated."""
    if not result.scenarios:
        return ""
    base, others = result.scenarios[0], result.scenarios[1:]
    scaled = [r.scenario for r in others if _same_solve(r, base)]
    other = [r.scenario for r in others if not _same_solve(r, base)]
    words = [f"for the case as written ('{base.scenario}'): its worst voltages, at its own worst places, "
             "and its limits"]
    if scaled:
        words.append("scenarios with the same solve (" + ", ".join(f"'{n}'" for n in scaled) + ") have the same "
                     "relative σ of Rg, GPR and the voltages; their own probabilities (their limits or fault current "
                     "differ) are given where their worst point is the same place")
    if other:
        words.append("scenarios with another soil (" + ", ".join(f"'{n}'" for n in other) + ") are not propagated: "
                     "their uncertainty is not known here")
    return "; ".join(words)


def sensitivity_level(case: Case, segments: int) -> int:
    """The factor on the segment length at which the sensitivities are taken: 1 up to COARSE_FROM segments, then
    4 where that model keeps COARSE_FLOOR segments, else 2."""
    if segments <= COARSE_FROM:
        return 1
    return 4 if len(segment(_coarsened(case, 4))) >= COARSE_FLOOR else 2


def _coarsened(case: Case, factor: int) -> Case:
    """The case with ``factor`` times its segment length; at four times also without the rods' end refinement
    (a sensitivity is a ratio of changes of one discretisation: on the benchmark yard, 148 rods and posts, σ(log)
    with and without it agree within 0.4 % while its depth levels double the cost of every nudged soil's tables)."""
    d = case.discretization
    if factor == 1:
        return case
    return replace(case, discretization=replace(d, max_segment=factor * d.max_segment,
                                                refine_rod_ends=d.refine_rod_ends and factor < 4))


def _field_sensitivities(case: Case, base_result: StudyResult, watch: "_Watch", factor: int,
                         progress, solve=solve_case) -> tuple[dict[str, list[float]], int]:
    """S_j = ∂ log y / ∂ log p_j of Rg, GPR and the worst voltages at their places (forward differences; one
    resistivity by Euler's theorem where it holds), and the number of solves it took."""
    names, x0 = soil_parameters(case.soil)
    n = len(case.soil.layers)
    solves = 0
    if factor > 1:                   # sensitivities at a coarser level (see COARSE_FROM)
        case = _coarsened(case, factor)
        shared = isinstance(solve, CoarseSolves) and solve.kept(case)    # the error estimate's, when it ran
        segments, kernel, solution, _ = solve(case)
        base, solves = watch.values(case, segments, kernel, solution), 0 if shared else 1
    else:
        base = watch.values(case, base_result.electrical.segments, base_result.electrical.kernel,
                            base_result.electrical.solution)
    scale_free = not case.electrodes.conductor_impedance and case.fault.split_network is None
    solved = [j for j in range(len(x0)) if not (scale_free and j == n - 1)]
    sens = {k: [float("nan")] * len(x0) for k in QUANTITIES}
    for count, j in enumerate(solved, start=1):
        x = x0.copy()
        x[j] += LOG_STEP
        nudged = replace(case, soil=soil_from_parameters(case.soil, x))
        segments, kernel, solution, _ = solve_case(nudged)
        v = watch.values(nudged, segments, kernel, solution)
        for k in QUANTITIES:
            sens[k][j] = _log_difference(base[k], v[k])
        if progress:
            progress("uncertainty", count / len(solved))
    if len(solved) < len(x0):
        for k in QUANTITIES:
            sens[k][n - 1] = 1.0 - sum(sens[k][i] for i in range(n - 1)) if base[k] is not None else float("nan")
    return sens, solves + len(solved)


def sensitivity_key(solve_key: str, factor: int, watch: "_Watch", case: Case) -> str:
    """The content key of a propagation's field sensitivities: the base solve's key, the level, the watched
    worst points (criterion, zone, place) and, where they set the scale, the fault-current paths."""
    points = [[c, ch.zone, ch.worst.x, ch.worst.y] for c, ch in watch.checks.items() if ch.worst is not None]
    doc = {"solve": solve_key, "level": factor, "step": LOG_STEP, "points": points,
           "split_network": repr(case.fault.split_network), "impedance": case.electrodes.conductor_impedance}
    return "sensitivities-" + hashlib.sha256(json.dumps(doc, sort_keys=True).encode()).hexdigest()


def _log_difference(base: float | None, value: float | None) -> float:
    """(log value − log base) / LOG_STEP; NaN where either is missing or not positive."""
    if base is None or value is None or base <= 0 or value <= 0:
        return float("nan")
    return (math.log(value) - math.log(base)) / LOG_STEP


class _Watch:
    """The as-written condition's governing touch, step and mesh checks (first standard), evaluated again for
    another solution of the same geometry: Rg, GPR, the worst voltages near the same places, and the limits of
    the same zones (which move with the top-soil resistivity)."""

    def __init__(self, result: StudyResult):
        self.result = result
        self.checks = {"touch": result.touch_check, "step": result.step_check, "mesh": result.mesh_check}
        self.searched = _values(result)

    def ratio(self, criterion: str) -> float | None:
        """The searched worst voltage over its limit (the verdict's own ratio)."""
        return self.searched[f"{criterion}_ratio"]

    def values(self, case: Case, segments=None, kernel=None, solution=None, limits_only: bool = False) -> dict:
        """Rg (Ω), GPR (V), the worst voltages near the known places (V) and their zones' limits (V)."""
        first = case.criteria.standards[0]
        limits = zone_limits(case.soil.top_resistivity, case.zones, case.fault.shock_duration, first,
                             case.criteria.footwear_resistance)
        names = [z.name for z in case.zones]
        weight = case.criteria.body_weight
        out: dict = {}
        for criterion, check in self.checks.items():
            lim = None
            if check.worst is not None and check.zone in names:
                k = names.index(check.zone)
                lim = (limits[k].step if criterion == "step" else limits[k].touch)[case.zones[k].weight(weight)]
            out[f"{criterion}_limit"] = lim
        if limits_only:
            return out
        _, _, ig, _ = grid_current(case, solution)
        gpr = ig * solution.resistance
        out["grid_resistance"], out["ground_potential_rise"] = solution.resistance, gpr
        potential = SurfacePotential(segments, solution.currents_per_volt, kernel)
        main = solution.metal.main_metal if solution.metal is not None else None

        def touch_at(xy):
            v = potential(xy)
            return 1.0 - v if main is None else np.abs(main(xy) - v)

        surface, zones, res = self.result.surface, zoning(case), case.surface.resolution
        for criterion, check in self.checks.items():
            value = None
            if check.worst is not None and check.zone in names:
                k = names.index(check.zone)
                if criterion == "step":
                    value = gpr * step_again(potential, check.worst, case.surface.step_distance, zones, k, res)
                else:
                    region = surface.meshes if criterion == "mesh" else surface.touch_area
                    value = gpr * touch_again(touch_at, check.worst, region, zones, k, res)
            out[criterion] = value
            lim = out[f"{criterion}_limit"]
            out[f"{criterion}_ratio"] = None if value is None or not lim else value / lim
        return out


def reference_sensitivities(case: Case) -> dict[str, np.ndarray]:
    """The former propagation's sensitivities S_j = ∂ log y / ∂ log p_j (forward differences of whole studies,
    each with its own search of the map), for the tests to check the faster method against."""
    case = _plain(case)
    _, x0 = soil_parameters(case.soil)
    base = _values(study_conditions(case, estimate_error=False, screen_drop=False))
    rows = []
    for j in range(len(x0)):
        x = x0.copy()
        x[j] += LOG_STEP
        rows.append(_values(study_conditions(replace(case, soil=soil_from_parameters(case.soil, x)),
                                             estimate_error=False, screen_drop=False)))
    return {k: np.array([_log_difference(base[k], r[k]) for r in rows]) for k in base}


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
