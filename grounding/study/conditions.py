"""One study condition after another: solve each distinct geometry once (at 1 V of GPR), then scale and judge
each condition (the case as written and every scenario) on it.

Conditions that differ only in fault data, criteria, body, shock duration, surface coverings that keep the zones'
order of severity, or conductor material share one solve (:class:`SolveKey`)."""

from __future__ import annotations

import time
from dataclasses import dataclass, replace
from typing import Callable

import numpy as np

from ..case.model import Case
from ..case.site import shapely_polygon
from ..geometry.segments import Segments
from ..kernels import SoilKernel
from ..materials import MATERIALS
from ..safety.conductor import check_conductor, governing_conductor
from ..safety.current_division import current_division
from ..safety.ieee80 import decrement_factor
from ..safety.simplified import simplified_method
from ..safety.site import Check, CriteriaResult, ZoneVerdict, governing, least_margin, separate_result, zone_limits
from ..solve.equipotential import Solution
from ..solve.run import solve_case
from ..surface.contours import contour_lines
from ..surface.fields import surface_fields
from ..surface.results import SeparateMetal, SurfaceResult
from ..surface.zoning import Zoning
from .accuracy import estimate_discretization_error
from .cache import cacheable, entry_key
from .metal_drop import DROP_WARNING, MetalDrop, metal_drop
from .result import Diagnostics, DiscretizationError, ElectricalResult, SafetyResult, SolveOrigin, StudyResult

Progress = Callable[[str, float], None]


def zone_severity(case: Case) -> tuple[int, ...]:
    """Rank of each surface zone's severity (0 the most lenient; equal limits, equal rank), by the IEEE Std 80
    touch limit at 1 s with the zone's body weight: a lower Cs·ρs or a lighter body gives a lower limit. The
    order does not depend on the shock duration (nor, with one body weight, on the weight), and the surface stage
    only compares severities (which zone a point on a shared edge, or a step across it, belongs to), so
    coverings that keep this order give the same surface results. With body weights per zone the step limits'
    order may differ from the touch limits'; the touch order is used."""
    limits = zone_limits(case.soil.top_resistivity, case.zones, 1.0)
    weight = case.criteria.body_weight
    values = [-lim.touch[z.weight(weight)] for z, lim in zip(case.zones, limits)]
    distinct = sorted(set(values))
    return tuple(distinct.index(v) for v in values)


def zoning(case: Case) -> Zoning:
    """The surface zones as the surface stage sees them: areas, and the rank of their severity."""
    return Zoning([None if z.area is None else shapely_polygon(z.area) for z in case.zones],
                  [float(r) for r in zone_severity(case)])


def separate_metal(case: Case, segments: Segments, solution: Solution) -> tuple[SeparateMetal, ...]:
    """Each separate electrode's segments and potential per volt of GPR."""
    out = []
    for g, e in enumerate(case.separate_electrodes, start=1):
        mask = segments.conductors.matching((e.key,))
        value = solution.group_potential[g]
        out.append(SeparateMetal(mask, 1.0 if e.connection == "bonded" else
                                 (complex(value) if np.iscomplexobj(value) else float(value))))
    return tuple(out)


@dataclass(frozen=True)
class UnitStudy:
    """What depends only on soil, geometry, discretisation and map: the solution and the surface fields
    at a GPR of 1 V. Studies that differ only in fault data, criteria or surface layer share one.

    Attributes
    ----------
    segments, kernel, solution
        The discretisation, soil kernel and solution at 1 V.
    surface : SurfaceResult
        Surface fields at a GPR of 1 V (scale by the GPR).
    error : DiscretizationError
        The discretisation-error estimate of Rg.
    timings : dict
        Stage timings of the solve, s.
    """

    segments: Segments
    kernel: SoilKernel
    solution: Solution
    surface: SurfaceResult
    error: DiscretizationError
    timings: dict
    drop: MetalDrop | None = None


@dataclass(frozen=True)
class SolveKey:
    """Everything a :class:`UnitStudy` depends on; two conditions with equal keys share one solve.

    The case-file key paths (``electrodes.grids[0]`` …) name the parts but do not change them and are left out.
    ``tests/test_solve_key.py`` lists every field of :class:`~grounding.case.model.Case` as in or out of the key.

    Attributes
    ----------
    layers : tuple of Layer
        The soil layers (resistivity Ω·m, thickness m).
    grids, conductors, rods : tuple
        The energised electrodes.
    material : str
        The default conductor material (its resistivity enters the coupled metal–soil solve).
    conductor_impedance : bool
        Whether the metal is solved as a network with the soil.
    conductor_temperature : float or None
        Temperature of the conductors' resistance, °C.
    frequency : float
        Fault frequency, Hz (the conductors' reactance).
    injection : tuple
        Where the fault current enters the metal: (x, y, z, share).
    discretization, surface, probes
        Segment length, map settings and probe points.
    zone_areas : tuple
        The surface zones' areas (None: the rest of the map).
    zone_severity : tuple of int
        The rank of each zone's severity (:func:`zone_severity`); the coverings themselves only set limits.
    separate : tuple
        Each separate electrode's name, connection and parts.
    """

    layers: tuple
    grids: tuple
    conductors: tuple
    rods: tuple
    material: str
    conductor_impedance: bool
    conductor_temperature: float | None
    frequency: float
    injection: tuple
    discretization: object
    surface: object
    probes: tuple
    zone_areas: tuple
    zone_severity: tuple
    separate: tuple


def solve_key(case: Case) -> SolveKey:
    """The :class:`SolveKey` of a case."""
    el = case.electrodes
    return SolveKey(layers=case.soil.layers, grids=_strip_keys(el.grids), conductors=_strip_keys(el.conductors),
                    rods=_strip_keys(el.rods), material=el.material, conductor_impedance=el.conductor_impedance,
                    conductor_temperature=el.conductor_temperature, frequency=case.fault.frequency,
                    injection=tuple(i.point + (i.share,) for i in case.fault.injection),
                    discretization=case.discretization, surface=case.surface, probes=case.probes,
                    zone_areas=tuple(z.area for z in case.zones), zone_severity=zone_severity(case),
                    separate=tuple((e.name, e.connection, _strip_keys(e.grids), _strip_keys(e.conductors),
                                    _strip_keys(e.rods)) for e in case.separate_electrodes))


def _strip_keys(part: tuple) -> tuple:
    """Drop the case-file key paths, which name but do not change the electrodes."""
    return tuple(replace(x, key="") if hasattr(x, "key") else x for x in part)


def rod_share(segments: Segments, solution: Solution) -> float:
    """The rods' share (0–1) of the energised metal's leakage current."""
    i = np.abs(solution.currents_per_volt)
    main = segments.group == 0
    total = float(i[main].sum())
    return float(i[main & segments.is_rod].sum()) / total if total > 0 else 0.0


class CoarseSolves:
    """The solves of one run at a discretisation other than the study's own, by solve key, each made once: the
    error estimate's solve at twice the segment length is also the soil-uncertainty propagation's base on large
    models. Called like :func:`~grounding.solve.run.solve_case`; kept only for the run (small: coarse
    segments, kernel and solution)."""

    def __init__(self):
        self._kept: dict = {}

    def kept(self, case: Case) -> bool:
        """Whether this run already solved ``case``'s discretisation."""
        return solve_key(case) in self._kept

    def __call__(self, case: Case, progress: Progress | None = None):
        key = solve_key(case)
        if key not in self._kept:
            self._kept[key] = solve_case(case, progress)
        return self._kept[key]


def solve_geometry(case: Case, progress: Progress | None = None, estimate_error: bool = True,
                   screen_drop: bool = True, coarse: CoarseSolves | None = None) -> UnitStudy:
    """Solve the electrodes at 1 V and map the surface; see :class:`UnitStudy`. ``screen_drop``: also screen
    the potential drop along the metal of an equipotential study (:func:`estimate_metal_drop`); ``coarse``:
    the run's coarser solves, shared with other stages (None: the error estimate solves its own)."""
    segments, kernel, solution, timings = solve_case(case, progress)
    t0 = time.perf_counter()
    if progress:
        progress("surface", 0.0)
    surface = surface_fields(segments, solution.currents_per_volt, 1.0, kernel, case.surface, case.probes,
                             progress=progress, zoning=zoning(case),
                             metal=separate_metal(case, segments, solution), check_map=estimate_error,
                             main_metal=solution.metal.main_metal if solution.metal is not None else None)
    timings["surface_s"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    if progress:
        progress("metal drop", 0.0)
    drop = metal_drop(case, segments, solution) if (screen_drop or solution.metal is not None) else None
    timings["metal_drop_s"] = time.perf_counter() - t0
    if estimate_error:
        if progress:
            progress("error estimate", 0.0)
        error, surface = estimate_discretization_error(case, solution, segments.base_count, surface,
                                                       rod_share(segments, solution), coarse or solve_case)
    else:
        error = DiscretizationError(None, None, None, "not requested")
    return UnitStudy(segments, kernel, solution, surface, error, timings, drop)


def study_conditions(case: Case, progress: Progress | None = None, estimate_error: bool = True,
                     unit: UnitStudy | None = None, screen_drop: bool = True, cache=None,
                     coarse: CoarseSolves | None = None) -> StudyResult:
    """The case as written and every scenario of it, without the soil-uncertainty propagation.

    With scenarios, the result is the case as written with ``scenarios`` holding every scenario's result
    (itself first) and the touch, step and mesh checks replaced by the governing (least margin) scenario's;
    a criterion passes only if it passes in every scenario. Scenarios share the solve where the soil,
    geometry, surface zones and map are equal (the fault data and coverings only scale the fields or
    change the limits); each result says where its solve came from (``diagnostics.solve``).

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
        Screen the potential drop along the metal (equipotential studies); off for the repeated solves of
        the soil-uncertainty propagation, which need only the voltages.
    cache : SolveCache, optional
        Solves kept between runs (:mod:`grounding.study.cache`): looked up before solving, filled after.
    coarse : CoarseSolves, optional
        The run's solves at other discretisations (the error estimates'), to share with later stages.

    Returns
    -------
    StudyResult
    """
    given = SolveOrigin("", "shared", "an earlier study with the same solve key")
    units = {} if unit is None else {solve_key(case): (unit, given)}
    t0 = time.perf_counter()
    name = case.base_scenario if case.scenarios else "the case"
    coarse = CoarseSolves() if coarse is None else coarse
    base = _run_condition(case, progress, estimate_error, units, screen_drop, name, cache, coarse)
    if not case.scenarios:
        return base
    results = [_named(base, case.base_scenario, time.perf_counter() - t0)]
    for sc in case.scenarios:
        t0 = time.perf_counter()
        r = _run_condition(sc.case, progress, estimate_error, units, screen_drop, sc.name, cache, coarse)
        results.append(_named(r, sc.name, time.perf_counter() - t0))
    combined = combine_scenarios(results)
    notes = unrelied_metal_notes(case, results)
    if not notes:
        return combined
    d = combined.diagnostics
    return replace(combined, diagnostics=replace(d, warnings=tuple(d.warnings) + tuple(notes)))


def _with_and_without(a: float, b: float, unit: str, digits: int) -> str:
    """'a unit with, b unit without (±x %)'."""
    change = f" ({(b - a) / a * 100:+.1f} %)" if a else ""
    return f"{a:,.{digits}f} {unit} with, {b:,.{digits}f} {unit} without{change}"


def unrelied_metal_notes(case: Case, results: list[StudyResult]) -> list[str]:
    """How much the separate electrodes that are not relied on (``rely_on: false``) help: Rg and the worst touch
    voltage of each condition with them and without them."""
    by_name = {r.scenario: r for r in results}
    out = []
    for sc in case.scenarios:
        if not sc.without or sc.of not in by_name or sc.name not in by_name:
            continue
        with_, without = by_name[sc.of], by_name[sc.name]
        names = ", ".join(f"'{n}'" for n in sc.without)
        parts = [f"Rg {_with_and_without(with_.grid_resistance, without.grid_resistance, 'Ω', 3)}"]
        ta, tb = with_.touch_check.worst, without.touch_check.worst
        if ta is not None and tb is not None:
            parts.append(f"worst touch {_with_and_without(ta.value, tb.value, 'V', 0)}")
        verdict = ("the verdicts are the same without it" if with_.passes == without.passes else
                   "the verdict changes without it: " + ("PASS with it, FAIL without" if with_.passes else
                                                          "FAIL with it, PASS without"))
        out.append(f"{names} (not relied on) in '{sc.of}': {'; '.join(parts)}; {verdict}; the study keeps the "
                   "worse of the two")
    return out


def _unit_for(case: Case, progress, estimate_error: bool, units: dict, screen_drop: bool, name: str, cache,
              coarse: CoarseSolves | None = None):
    """The UnitStudy of a condition and where it came from: shared with an earlier condition, kept from an earlier
    run, or solved now (and then kept)."""
    key = solve_key(case)
    if key in units:
        unit, first = units[key]
        return unit, SolveOrigin(first.key, "shared", first.shared_with if first.origin == "shared" else name)
    content = entry_key(key, estimate_error, screen_drop)
    why_not = cacheable(case)
    unit, note = None, (f"solve not kept between runs: {why_not}" if why_not and cache is not None else "")
    if cache is not None and not why_not:
        parts, note = cache.get(content, case)
        unit = None if parts is None else UnitStudy(*parts)
    origin = "cache" if unit is not None else "solved"
    if unit is None:
        unit = solve_geometry(case, progress, estimate_error, screen_drop, coarse)
        if cache is not None and not why_not:
            cache.put(content, unit)
    units[key] = (unit, SolveOrigin(content, "shared", name))
    return unit, SolveOrigin(content, origin, "", note)


def _named(result: StudyResult, name: str, seconds: float) -> StudyResult:
    """A scenario's result with its name and the time it took, s."""
    d = result.diagnostics
    return replace(result, scenario=name, diagnostics=replace(d, timings={**d.timings, "scenario_s": seconds}))


def combine_scenarios(results: list[StudyResult]) -> StudyResult:
    """The first result, with every scenario's result attached and the checks of the governing scenario."""
    def worst(name: str) -> Check:
        return least_margin([replace(getattr(r, name), scenario=r.scenario) for r in results])

    first = results[0]
    safety = replace(first.safety, touch_check=worst("touch_check"), step_check=worst("step_check"),
                     mesh_check=worst("mesh_check"))
    # conductor sizing: the scenario whose fault needs the most area for what is installed (ties: the first)
    conductor = governing_conductor([replace(r.conductor, scenario=r.scenario) for r in results])
    return replace(first, safety=safety, conductor=conductor, scenarios=tuple(results))


def grid_current(case: Case, solution: Solution):
    """The current the grid sends into the soil, IG = Df·Sf·3I0 (A), with Sf from the case's fault-current paths
    and the solved grid impedance where they are given. Returns (case with that Sf, Df, IG, the current division
    or None)."""
    fault = case.fault
    df = decrement_factor(fault.x_over_r, fault.frequency, fault.clearing_time)
    division = None
    if fault.split_network is not None:
        zg = solution.metal.solution.impedance if solution.metal is not None else complex(solution.resistance)
        division = current_division(fault.split_network, zg)
        fault = replace(fault, split_factor=division.split_factor, split_basis=division.basis)
        case = replace(case, fault=fault)
    return case, df, df * fault.split_factor * fault.current, division


def _run_condition(case: Case, progress, estimate_error: bool, units: dict, screen_drop: bool = True,
                   name: str = "the case", cache=None, coarse: CoarseSolves | None = None) -> StudyResult:
    """One condition: solve (or re-use the solve of an equal geometry, or a kept one) and judge."""
    unit, origin = _unit_for(case, progress, estimate_error, units, screen_drop, name, cache, coarse)
    segments, solution = unit.segments, unit.solution
    case, df, ig, division = grid_current(case, solution)
    fault = case.fault
    gpr = ig * solution.resistance
    currents = solution.currents(ig)
    if np.iscomplexobj(currents):
        currents = np.abs(currents)                        # phasor magnitudes for the outputs
    surface = unit.surface.scaled(gpr)
    judged = tuple(_judge(case, standard, surface, segments, solution, gpr, ig) for standard in case.criteria.standards)
    first = judged[0]
    zones, touch, step, mesh = first.zones, first.touch, first.step, first.mesh
    governing_limits = zones[[z.name for z in zones].index(touch.zone)].limits
    contours = tuple((level, contour_lines(surface.x, surface.y, surface.potential, [level])[0])
                     for level in case.surface.contours)
    warnings = list(case.notes + segments.warnings)
    if case.soil_fit is not None:
        pts = np.vstack([segments.start[:, :2], segments.end[:, :2]])
        diagonal = float(np.linalg.norm(pts.max(axis=0) - pts.min(axis=0)))
        largest = float(np.max(case.soil_fit.readings.spacing))
        if largest < diagonal:
            warnings.append(f"the sounding's largest spacing ({largest:g} m) is shorter than the site's diagonal "
                            f"({diagonal:.0f} m): the deep soil that governs Rg of a site this size is not measured "
                            "(common practice: spacings up to about the diagonal of the grid)")
    if division is not None:
        lowest = min(z.tolerable_touch for z in zones)
        for p in division.paths:
            far = abs(p.far_potential) * fault.current * df
            if far > lowest:
                where = "its far-end earthing" if p.kind == "cable" else "its first tower footing"
                warnings.append(f"TRANSFERRED POTENTIAL: {p.kind} '{p.name}' carries {abs(p.current) * fault.current / 1000:.2f} "
                                f"kA; {where} rises to about {far:,.0f} V (Df·3I0 through the path's own earthing), "
                                f"above this study's lowest tolerable touch voltage ({lowest:,.0f} V): that place is "
                                "outside this study; check its touch and step voltages there")
    drop = unit.drop
    if drop is not None and drop.fraction is not None and drop.estimated and drop.fraction > DROP_WARNING:
        x, y, _ = drop.feed
        warnings.append(f"CONDUCTOR IMPEDANCE: the metal is not one equipotential: its potential may drop by "
                        f"{100 * drop.fraction:.1f} % of the GPR from the feed point ({x:.1f}, {y:.1f}) m across the "
                        f"metal ({drop.note}); touch voltages near the feed point can be larger than this study's; "
                        "set electrodes.conductor_impedance: true and give fault.injection")
    if drop is not None and drop.fraction is None and solution.metal is None:
        warnings.append(f"the potential drop along the metal was not screened ({drop.note}): the equipotential "
                        "model is unchecked for this layout; on a large or long layout set "
                        "electrodes.conductor_impedance: true and give fault.injection")
    if solution.metal is not None:
        warnings.extend(_impedance_notes(case, segments, solution))
    for k, (px, py) in enumerate(case.probes):
        if not (surface.x[0] <= px <= surface.x[-1] and surface.y[0] <= py <= surface.y[-1]):
            warnings.append(f"probes[{k}] at ({px:g}, {py:g}) m lies outside the surface map ({surface.x[0]:.0f} to "
                            f"{surface.x[-1]:.0f} m, {surface.y[0]:.0f} to {surface.y[-1]:.0f} m): its surface "
                            "potential is exact, but its touch voltage assumes a hand on the grid's metal, which is "
                            "out of reach there unless metal (a fence, pipe or cable) carries the potential out")
    for z in zones:
        if z.zone.area is not None and z.extremes.step is None:
            warnings.append(f"surface zone '{z.name}' holds no point of the surface map; its step voltage was not "
                            "evaluated: widen surface.margin or refine surface.resolution")
    for level, lines in contours:
        if level >= gpr:
            warnings.append(f"surface.contours level {level:,.0f} V is at or above the GPR ({gpr:,.0f} V): no line")
        elif level < float(np.min(surface.potential)):
            warnings.append(f"surface.contours level {level:,.0f} V lies beyond the map (lowest mapped potential "
                            f"{np.min(surface.potential):,.0f} V): the whole map is above it; widen surface.margin "
                            "to draw the line")
    el = case.electrodes
    horizontal = list(el.grids) + list(el.conductors)
    conductor = governing_conductor([
        check_conductor(df * fault.current, fault.clearing_time, MATERIALS[x.material or el.material],
                        el.ambient_temperature, el.max_temperature, x.diameter, x.area, x.key)
        for x in (horizontal or el.rods)])
    electrical = ElectricalResult(segments, unit.kernel, solution, currents, df, ig, gpr, division, drop)
    safety = SafetyResult(judged, touch, step, mesh, governing_limits, simplified_method(case, ig))
    if origin.note:
        warnings.append(origin.note)
    diagnostics = Diagnostics(unit.error, dict(unit.timings), tuple(warnings), solve=origin)
    return StudyResult(case=case, electrical=electrical, surface=replace(surface, contours=contours), safety=safety,
                       conductor=conductor, diagnostics=diagnostics)


def _impedance_notes(case: Case, segments: Segments, solution: Solution) -> list[str]:
    """What the reader of a study with conductor impedance should know about its model."""
    notes = []
    f = case.fault.frequency
    if f > 0:
        rho = min(layer.resistivity for layer in case.soil.layers)
        depth = 503.0 * np.sqrt(rho / f)
        pts = np.vstack([segments.start[:, :2], segments.end[:, :2]])
        extent = float(np.linalg.norm(pts.max(axis=0) - pts.min(axis=0)))
        if extent > 0.5 * depth:
            notes.append(f"the electrodes span {extent:,.0f} m, more than half the soil's skin depth ({depth:,.0f} m "
                         f"at {rho:g} Ω·m, {f:g} Hz): the partial inductances leave out the earth-return effect and "
                         "overstate the inductive drop along the metal (the conservative side)")
    comp = solution.metal.network.components()
    main = solution.metal.network.group == 0
    if len(np.unique(comp[main])) > 1:
        notes.append("parts of the energised metal do not touch the rest; they are taken as bonded to the first "
                     "injection point by ideal leads (the conservative side: they sit at its potential)")
    return notes


def _judge(case: Case, standard: str, surface: SurfaceResult, segments: Segments, solution: Solution, gpr: float,
           ig: float) -> CriteriaResult:
    """The verdicts of one standard on scaled surface fields."""
    fault = case.fault
    limits = zone_limits(case.soil.top_resistivity, case.zones, fault.shock_duration, standard,
                         case.criteria.footwear_resistance)
    weight = case.criteria.body_weight
    zones = tuple(ZoneVerdict(z, lim, z.weight(weight), ext) for z, lim, ext in zip(case.zones, limits, surface.zones))
    touch, step, mesh = governing(zones, "touch"), governing(zones, "step"), governing(zones, "mesh", needed=False)
    separate = tuple(
        separate_result(e.name, e.connection,
                        gpr * (1.0 if e.connection == "bonded" else float(np.abs(solution.group_potential[g]))),
                        gpr, _separate_current(e, g, segments, solution, ig), m.touch, zones)
        for g, (e, m) in enumerate(zip(case.separate_electrodes, surface.metal), start=1))
    return CriteriaResult(standard, zones, touch, step, mesh, separate)


def _separate_current(e, g: int, segments: Segments, solution: Solution, grid_current: float) -> float:
    """Net current a separate electrode sends into the soil, A, when the grid injects ``grid_current``."""
    scale = grid_current * solution.resistance
    if e.connection == "bonded":
        mask = segments.conductors.matching((e.key,))[segments.conductor]
        return _signed(solution.currents_per_volt[mask].sum(), solution) * scale
    return _signed(solution.group_current[g], solution) * scale


def _signed(value, solution: Solution) -> float:
    """A real net current as it is; a phasor as its magnitude, negative when it flows against the main
    system's current (more than 90° out of phase with it)."""
    if not np.iscomplexobj(value):
        return float(value)
    main = solution.group_current[0]
    return float(np.abs(value) * (1.0 if np.real(value * np.conj(main)) >= 0 else -1.0))
