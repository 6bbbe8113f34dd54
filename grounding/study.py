"""The study pipeline and its Python API: case → geometry → soil → assembly → solve → surface → safety.

>>> from grounding import load_case, run_study          # doctest: +SKIP
>>> result = run_study(load_case("cases/river-terrace-uniform.yaml"))
>>> result.grid_resistance, result.ground_potential_rise
"""

from __future__ import annotations

import os
import time
from dataclasses import dataclass, replace
from typing import Callable

import numpy as np

from .assembly import AssemblyOptions, matrix_memory_bytes
from .operators import compressed_memory_bytes, compressed_operator, dense_operator
from .case import Case
from .cautions import CAUTIONS
from .errors import GroundingError, ModelTooLargeError
from .geometry import Segments, segment
from .materials import MATERIALS
from .safety.current_division import CurrentDivision, current_division
from .safety.conductor import ConductorCheck, check_conductor, governing_conductor
from .case_site import shapely_polygon
from .safety.ieee80 import Limits, decrement_factor
from .safety.simplified import SimplifiedResult, simplified_method
from .safety.site import (Check, CriteriaResult, SeparateResult, ZoneVerdict, governing, least_margin,
                          separate_result, zone_limits)
from .soil import SoilKernel, make_kernel
from .conductor_impedance import CompressedInductance, series_impedance
from .metal_network import MetalNetwork, metal_network
from .solve import Solution, solve_operator
from .solve_network import MetalState, solve_network, solve_network_iterative
from .surface import (Extreme, SeparateMetal, SurfacePotential, SurfaceResult, ZoneExtremes, Zoning, contour_lines,
                      map_axes, step_at, surface_fields)

Progress = Callable[[str, float], None]

#: Observed convergence order of Rg in the segment length (measured on grids, see DEVELOPERS.md).
CONVERGENCE_ORDER = 1.0
#: Share of physical memory a study may plan to use for its dense matrices.
MEMORY_SHARE = 0.5
#: Most surface-map points a study evaluates.
MAX_MAP_POINTS = 1_000_000
#: Largest system the ``auto`` solver factorises densely; above it the compressed operator and conjugate
#: gradients are faster. Measured build + solve, two-layer soil, 2 cores: 1 574 segments dense 1.2 s,
#: iterative 1.2 s; 3 074: 3.0 s / 2.1 s; 5 074: 8.7 s / 3.0 s; 8 134: 18.7 s / 3.8 s; 12 000 (uniform):
#: 39.5 s / 3.9 s. Rg agreed to 1e-6 throughout. Small cases keep the dense path they always had.
DENSE_LIMIT = 3_000


@dataclass(frozen=True)
class DiscretizationError:
    """Estimate of the discretisation error of Rg from a second solve at twice the segment length.

    Attributes
    ----------
    coarse_resistance : float or None
        Rg at twice the segment length, Ω.
    estimate_ohm : float or None
        |Rg − Rg(2h)| / (2^p − 1), Ω, with p the convergence order.
    relative : float or None
        estimate / Rg.
    note : str
        Why no estimate was made, when it was not.
    """

    coarse_resistance: float | None
    estimate_ohm: float | None
    relative: float | None
    note: str = ""


@dataclass(frozen=True)
class StudyResult:
    """Everything a study computed. Currents in A, voltages in V, resistances in Ω, lengths in m."""

    case: Case
    segments: Segments
    kernel: SoilKernel
    solution: Solution
    decrement_factor: float
    grid_current: float
    ground_potential_rise: float
    segment_currents: np.ndarray
    surface: SurfaceResult
    limits: Limits
    simplified: SimplifiedResult
    conductor: ConductorCheck
    discretization_error: DiscretizationError
    timings: dict
    warnings: tuple[str, ...]
    zones: tuple[ZoneVerdict, ...] = ()
    touch_check: Check | None = None
    step_check: Check | None = None
    mesh_check: Check | None = None
    separate: tuple[SeparateResult, ...] = ()
    contours: tuple[tuple[float, list], ...] = ()
    scenario: str = ""
    scenarios: tuple["StudyResult", ...] = ()
    convergence: "Convergence | None" = None
    uncertainty: object = None
    criteria: tuple[CriteriaResult, ...] = ()
    cautions: tuple[str, ...] = CAUTIONS
    metal_drop: "MetalDrop | None" = None
    current_division: CurrentDivision | None = None

    @property
    def grid_resistance(self) -> float:
        """Rg, Ω."""
        return self.solution.resistance

    @property
    def worst_touch(self) -> float:
        """Worst touch voltage of the governing zone, V (NaN when evaluated nowhere)."""
        return self.touch_check.worst.value if self.touch_check.worst else float("nan")

    @property
    def worst_step(self) -> float:
        """Worst step voltage of the governing zone, V (NaN when evaluated nowhere)."""
        return self.step_check.worst.value if self.step_check.worst else float("nan")

    @property
    def separate_ok(self) -> bool:
        """True when the touch voltage near every separate electrode is within its zone's limit."""
        return all(e.touch.ok for e in self.separate)

    @property
    def passes(self) -> bool:
        """True when touch, step, mesh (where meshes exist), separate-electrode touch and conductor size all
        pass, in every scenario."""
        if self.scenarios:
            return all(r.passes for r in self.scenarios)
        return bool(self.conductor.ok and all(c.passes for c in self.criteria))

    @property
    def body_weight(self) -> int:
        """Body weight the verdicts use, kg."""
        return self.case.criteria.body_weight

    @property
    def tolerable_touch(self) -> float:
        """Tolerable touch voltage in the governing touch zone for the case's body weight, V."""
        return self.touch_check.limit

    @property
    def tolerable_step(self) -> float:
        """Tolerable step voltage in the governing step zone for the case's body weight, V."""
        return self.step_check.limit

    @property
    def touch_ok(self) -> bool:
        """True when the worst touch voltage of every zone is within that zone's limit."""
        return bool(self.touch_check.ok)

    @property
    def step_ok(self) -> bool | None:
        """True when the worst step voltage of every zone is within that zone's limit; None when the
        standard sets no step limit (EN 50522)."""
        return None if self.step_check.ok is None else bool(self.step_check.ok)

    @property
    def mesh_ok(self) -> bool | None:
        """True when the worst mesh voltage of every zone is within its touch limit; None without meshes."""
        return self.mesh_check.ok

    def local_limits(self) -> tuple[np.ndarray, np.ndarray]:
        """Tolerable touch and step voltage (V) at every map point, from the zone it lies in; shape of the map."""
        labels = self.surface.zone_labels
        touch = np.array([z.tolerable_touch for z in self.zones])
        step = np.array([np.nan if z.tolerable_step is None else z.tolerable_step for z in self.zones])
        return touch[labels], step[labels]

    def probe_touch_voltages(self) -> np.ndarray:
        """Touch voltage at the probes, V: GPR − surface potential (equipotential metal), or |V_metal − V_surface|
        with the nearest energised metal (conductor impedance modelled)."""
        if self.surface.probe_touch is not None:
            return self.surface.probe_touch
        return self.ground_potential_rise - self.surface.probe_potential


def available_memory() -> int:
    """Physical memory of this machine, bytes."""
    try:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):
        return 8 * 2 ** 30


def solver_kind(case: Case, n_segments: int) -> str:
    """``dense`` or ``iterative``: the case's ``discretization.solver``, with ``auto`` resolved by size."""
    chosen = case.discretization.solver
    if chosen == "auto":
        return "dense" if n_segments <= DENSE_LIMIT else "iterative"
    return chosen


def solver_memory_bytes(kind: str, n_segments: int) -> int:
    """Memory the ``dense`` or ``iterative`` solve of ``n_segments`` segments needs, bytes."""
    return matrix_memory_bytes(n_segments) if kind == "dense" else compressed_memory_bytes(n_segments)


def check_model_size(case: Case, segments: Segments) -> None:
    """Refuse a discretisation whose solver would not fit in memory, saying what each solver would need."""
    n = len(segments)
    kind = solver_kind(case, n)
    dense, compressed = solver_memory_bytes("dense", n), solver_memory_bytes("iterative", n)
    need = solver_memory_bytes(kind, n)
    limit = MEMORY_SHARE * available_memory()
    if need > limit:
        gib = 2 ** 30
        if kind == "dense" and compressed <= limit:
            fix = "use discretization.solver: iterative (or auto)"
        else:
            fix = f"use max_segment of at least {case.discretization.max_segment * need / limit:.2g} m"
        raise ModelTooLargeError(
            f"{case.source}: discretization.max_segment = {case.discretization.max_segment:g} m gives {n:,} "
            f"segments; the {kind} solve would need {need / gib:.1f} GiB (dense: {dense / gib:.1f} GiB, iterative: "
            f"{compressed / gib:.1f} GiB), more than the {limit / gib:.1f} GiB this machine can spare; {fix}")
    x, y = map_axes(segments, case.surface)
    if len(x) * len(y) > MAX_MAP_POINTS:
        raise ModelTooLargeError(
            f"{case.source}: surface.resolution = {case.surface.resolution:g} m gives a map of {len(x)} × {len(y)} = "
            f"{len(x) * len(y):,} points (at most {MAX_MAP_POINTS:,}); use a resolution of at least "
            f"{case.surface.resolution * np.sqrt(len(x) * len(y) / MAX_MAP_POINTS):.2g} m or a smaller margin")


def _solve(case: Case, progress: Progress | None = None):
    """Segment, assemble and solve one discretisation; returns (segments, kernel, solution, timings)."""
    segments = segment(case)
    check_model_size(case, segments)
    kernel = make_kernel(case.soil, case.discretization.max_segment)
    if case.electrodes.conductor_impedance:
        return _solve_with_impedance(case, segments, kernel, progress)
    t0 = time.perf_counter()
    kind = solver_kind(case, len(segments))
    build = dense_operator if kind == "dense" else compressed_operator
    try:
        operator = build(segments, kernel, AssemblyOptions(), progress)
        t1 = time.perf_counter()
        solution = solve_operator(operator, segments.group, connections(case), progress)
    except MemoryError:
        need = solver_memory_bytes(kind, len(segments))
        raise ModelTooLargeError(
            f"{case.source}: the {kind} solve of {len(segments):,} segments ran out of memory (planned "
            f"{need / 2 ** 30:.1f} GiB); use a longer discretization.max_segment or a machine with more memory") from None
    t2 = time.perf_counter()
    solution = replace(solution, solver={**solution.solver, "operator_mb": round(operator.nbytes / 1e6, 1)})
    return segments, kernel, solution, {"assemble_s": t1 - t0, "solve_s": t2 - t1}


def _injection_nodes(case: Case, network: MetalNetwork) -> list[tuple[int, float]]:
    """Node and share of each injection point (the geometry put a node on each)."""
    return [(network.nearest_node(inj.point)[0], inj.share) for inj in case.fault.injection]


def _network_solve(case: Case, segments: Segments, R: np.ndarray, injection=None) -> MetalState:
    """The coupled metal–soil solution for 1 A at the case's injection points (or ``injection``)."""
    network = metal_network(segments)
    Z = series_impedance(case, segments).matrix()
    ns = solve_network(R, network, Z, injection or _injection_nodes(case, network), connections(case))
    return MetalState(network, ns)


def _solve_with_impedance(case: Case, segments: Segments, kernel: SoilKernel, progress: Progress | None):
    """Conductors with impedance: the coupled metal–soil solve (see solve_network), dense up to DENSE_LIMIT
    segments (``auto``), else GMRES on the compressed soil and inductance operators."""
    n = len(segments)
    kind = solver_kind(case, n)
    t0 = time.perf_counter()
    iterations = None
    try:
        if kind == "dense":
            operator = dense_operator(segments, kernel, AssemblyOptions(), progress)
            t1 = time.perf_counter()
            metal = _network_solve(case, segments, operator.matrix)
        else:
            operator = compressed_operator(segments, kernel, AssemblyOptions(), progress)
            network = metal_network(segments)
            f = case.fault.frequency
            inductance = CompressedInductance(segments) if f > 0 else None
            internal = series_impedance(case, segments, inductance=False).internal
            t1 = time.perf_counter()
            ns, iterations = solve_network_iterative(operator, network, internal, inductance, f,
                                                     _injection_nodes(case, network), connections(case))
            metal = MetalState(network, ns)
    except MemoryError:
        raise ModelTooLargeError(
            f"{case.source}: the coupled {kind} solve of {n:,} segments ran out of memory; use a longer "
            "discretization.max_segment or a machine with more memory") from None
    t2 = time.perf_counter()
    ns = metal.solution
    scale = 1.0 / abs(ns.impedance)
    groups = len(connections(case))
    seg_group = segments.group
    node_group = metal.network.group
    potential = np.array([ns.node_potential[ns.injection_nodes[0]] if g == 0 else
                          (ns.node_potential[node_group == g].mean() if (node_group == g).any() else 0.0)
                          for g in range(groups)], complex) * scale
    current = (np.bincount(seg_group, ns.leakage.real, minlength=groups) +
               1j * np.bincount(seg_group, ns.leakage.imag, minlength=groups)) * scale
    solution = Solution(ns.leakage * scale, abs(ns.impedance), ns.relative_residual, potential, current,
                        {"kind": kind, "network": True, "relative_residual": ns.relative_residual,
                         "power_balance": ns.power_balance, "operator_mb": round(operator.nbytes / 1e6, 1),
                         **({"iterations": iterations} if iterations is not None else {})},
                        metal)
    return segments, kernel, solution, {"assemble_s": t1 - t0, "solve_s": t2 - t1}


#: The potential-drop screening of an equipotential study runs on at most this many segments (the
#: discretisation is coarsened until it fits); it is an estimate, not a result.
DROP_ESTIMATE_SEGMENTS = 400
#: A drop of the metal potential beyond this share of the GPR makes the equipotential model questionable.
DROP_WARNING = 0.02


@dataclass(frozen=True)
class MetalDrop:
    """How far the metal's potential varies, from the conductors' series impedance.

    Attributes
    ----------
    fraction : float or None
        Largest |V_node − V_feed| / |V_feed| over the energised metal.
    low : float or None
        Least |V_node| / |V_feed| over the energised metal.
    feed : (x, y, z) or None
        Where the current was taken to enter, m.
    estimated : bool
        True for the screening estimate of an equipotential study (coarse segments; the feed point the
        case's injection or the metal nearest the centroid), False for the coupled solution's own value.
    note : str
        How it was obtained, or why not.
    """

    fraction: float | None
    low: float | None
    feed: tuple[float, float, float] | None
    estimated: bool
    note: str = ""


def metal_drop(case: Case, segments: Segments, solution: Solution) -> MetalDrop:
    """The metal potential's spread: from the coupled solution, or screened for an equipotential study."""
    if solution.metal is not None:
        return _drop_of(solution.metal, solution.metal.solution.injection_nodes[0], False,
                        "from the coupled metal–soil solution")
    return estimate_metal_drop(case, segments)


def _drop_of(metal: MetalState, feed_node: int, estimated: bool, note: str) -> MetalDrop:
    """Largest |V_node − V_feed| / |V_feed| and least |V_node| / |V_feed| over the energised metal."""
    v = metal.node_potential[metal.network.group == 0]
    v0 = metal.node_potential[feed_node]
    return MetalDrop(float(np.max(np.abs(v - v0)) / abs(v0)), float(np.min(np.abs(v)) / abs(v0)),
                     tuple(float(x) for x in metal.network.nodes[feed_node]), estimated, note)


def estimate_metal_drop(case: Case, segments: Segments | None = None) -> MetalDrop:
    """Screening of an equipotential study: the coupled solve on a coarse discretisation (at most
    DROP_ESTIMATE_SEGMENTS segments), fed at the case's injection point or at the energised metal's node
    nearest its centroid. ``segments``: the case's own segmentation, used as it is when small enough, else to
    start the coarsening near the right length."""
    h = case.discretization.max_segment
    coarse = case
    if segments is None or len(segments) > DROP_ESTIMATE_SEGMENTS:
        if segments is not None:
            h *= 1.1 * len(segments) / DROP_ESTIMATE_SEGMENTS
        for _ in range(10):
            coarse = replace(case, discretization=replace(case.discretization, max_segment=h))
            segments = segment(coarse)
            if len(segments) <= DROP_ESTIMATE_SEGMENTS:
                break
            h *= 2
        else:
            return MetalDrop(None, None, None, True, f"not estimated: the layout needs more than "
                                                     f"{DROP_ESTIMATE_SEGMENTS} segments even when coarsened")
    kernel = make_kernel(coarse.soil, h)
    R = dense_operator(segments, kernel, AssemblyOptions()).matrix
    network = metal_network(segments)
    if case.fault.injection:
        injection = _injection_nodes(coarse, network)
        where = "the case's fault.injection"
    else:
        main = network.group == 0
        centre = network.nodes[main].mean(axis=0)
        injection = [(network.nearest_node(centre)[0], 1.0)]
        where = "the metal nearest the centroid (no fault.injection given)"
    try:
        metal = _network_solve(coarse, segments, R, injection)
    except GroundingError as exc:
        return MetalDrop(None, None, None, True, f"not estimated: {exc}")
    return _drop_of(metal, injection[0][0], True,
                    f"screening estimate: {len(segments)} segments of up to {h:g} m, current entering at {where}")


def connections(case: Case) -> tuple[str, ...]:
    """Connection of each potential group: the energised system, then every separate electrode."""
    return ("energised",) + tuple("energised" if e.connection == "bonded" else e.connection
                                  for e in case.separate_electrodes)


def zoning(case: Case) -> Zoning:
    """The surface zones as the surface stage sees them: areas, and severity by Cs·ρs (lower is more severe;
    the order of the IEEE Std 80 limits does not depend on body weight or shock duration)."""
    limits = zone_limits(case.soil.top_resistivity, case.zones, 1.0)
    return Zoning([None if z.area is None else shapely_polygon(z.area) for z in case.zones],
                  [-lim.cs * lim.surface_resistivity for lim in limits])


def separate_metal(case: Case, segments: Segments, solution: Solution) -> tuple[SeparateMetal, ...]:
    """Each separate electrode's segments and potential per volt of GPR."""
    out = []
    for g, e in enumerate(case.separate_electrodes, start=1):
        mask = segments.conductors.matching((e.key,))
        value = solution.group_potential[g]
        out.append(SeparateMetal(mask, 1.0 if e.connection == "bonded" else
                                 (complex(value) if np.iscomplexobj(value) else float(value))))
    return tuple(out)


def estimate_discretization_error(case: Case, fine: Solution, fine_segments: int,
                                  surface: SurfaceResult | None = None) -> tuple[DiscretizationError, SurfaceResult | None]:
    """Second solve at twice the segment length (about an eighth of the cost) and Richardson's estimate
    of the error of Rg; with the unit ``surface`` of the fine solve, also the worst voltages of every zone
    re-evaluated at the same points from the coarse solve (``Extreme.segment_check``)."""
    coarse_case = replace(case, discretization=replace(case.discretization,
                                                            max_segment=2 * case.discretization.max_segment))
    segments, kernel, coarse, _ = _solve(coarse_case)
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


def geometry_key(case: Case) -> str:
    """A key equal for cases whose :class:`UnitStudy` is the same (soil, electrode geometry,
    discretisation, surface map and probes); fault, criteria, surface layer and material do not enter."""
    el = case.electrodes
    parts = (case.soil.layers, el.grids, el.conductors, el.rods, case.discretization, case.surface, case.probes,
             (el.material, el.conductor_impedance, el.conductor_temperature, case.fault.frequency,
              tuple(i.point + (i.share,) for i in case.fault.injection)),
             tuple(replace(z, key="") for z in case.surface_zones),
             tuple((e.name, e.connection, _strip_keys(e.grids), _strip_keys(e.conductors), _strip_keys(e.rods))
                   for e in case.separate_electrodes))
    return repr(tuple(_strip_keys(p) for p in parts))


def _strip_keys(part):
    """Drop the case-file key paths, which name but do not change the electrodes."""
    if isinstance(part, tuple):
        return tuple(replace(x, key="") if hasattr(x, "key") else x for x in part)
    return part


def solve_geometry(case: Case, progress: Progress | None = None, estimate_error: bool = True,
                   screen_drop: bool = True) -> UnitStudy:
    """Solve the electrodes at 1 V and map the surface; see :class:`UnitStudy`. ``screen_drop``: also screen
    the potential drop along the metal of an equipotential study (:func:`estimate_metal_drop`)."""
    segments, kernel, solution, timings = _solve(case, progress)
    t0 = time.perf_counter()
    surface = surface_fields(segments, solution.currents_per_volt, 1.0, kernel, case.surface, case.probes,
                             progress=progress, zoning=zoning(case),
                             metal=separate_metal(case, segments, solution), check_map=estimate_error,
                             main_metal=solution.metal.main_metal if solution.metal is not None else None)
    timings["surface_s"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    drop = metal_drop(case, segments, solution) if (screen_drop or solution.metal is not None) else None
    timings["metal_drop_s"] = time.perf_counter() - t0
    if estimate_error:
        error, surface = estimate_discretization_error(case, solution, len(segments), surface)
    else:
        error = DiscretizationError(None, None, None, "not requested")
    return UnitStudy(segments, kernel, solution, surface, error, timings, drop)


def run_study(case: Case, progress: Progress | None = None, estimate_error: bool = True,
              unit: UnitStudy | None = None, screen_drop: bool = True) -> StudyResult:
    """Run a whole study: the case as written and every scenario of it.

    With scenarios, the result is the case as written with ``scenarios`` holding every scenario's result
    (itself first) and the touch, step and mesh checks replaced by the governing (least margin) scenario's;
    a criterion passes only if it passes in every scenario. Scenarios share the solve where the soil,
    geometry, surface zones and map are equal (the fault data and coverings only scale the fields or
    change the limits).

    Parameters
    ----------
    case : Case
        A validated case (see :func:`grounding.load_case`).
    progress : callable, optional
        Called as progress(stage, fraction) during long stages.
    estimate_error : bool
        Also solve at twice the segment length to estimate the discretisation error of Rg.
    unit : UnitStudy, optional
        A solution of the same geometry (``geometry_key`` equal) to re-use instead of solving again.
    screen_drop : bool
        Screen the potential drop along the metal (equipotential studies); off for the repeated solves of
        the soil-uncertainty propagation, which need only the voltages.

    Returns
    -------
    StudyResult
    """
    units = {} if unit is None else {geometry_key(case): unit}
    t0 = time.perf_counter()
    base = _run_condition(case, progress, estimate_error, units, screen_drop)
    if not case.scenarios:
        return base
    results = [replace(base, scenario=case.base_scenario, timings={**base.timings,
                                                                    "scenario_s": time.perf_counter() - t0})]
    for sc in case.scenarios:
        t0 = time.perf_counter()
        r = _run_condition(sc.case, progress, estimate_error, units, screen_drop)
        results.append(replace(r, scenario=sc.name, timings={**r.timings, "scenario_s": time.perf_counter() - t0}))
    return combine_scenarios(results)


@dataclass(frozen=True)
class ConvergenceRound:
    """One round of a convergence study: sizes (m), segment count and the governing worst voltages (V)."""

    max_segment: float
    resolution: float
    segments: int
    touch: float | None
    step: float | None
    mesh: float | None


@dataclass(frozen=True)
class Convergence:
    """The rounds of ``converge_study``, whether the worst voltages settled within ``tolerance``, and why
    it stopped."""

    rounds: tuple[ConvergenceRound, ...]
    converged: bool
    tolerance: float
    note: str


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
                   progress: Progress | None = None) -> tuple[StudyResult, Convergence]:
    """Halve the segment length and the map spacing together until the governing worst touch, step and
    mesh voltages change by less than ``tolerance`` (relative) between rounds.

    Before each refinement the model size is checked against memory and the map-point limit; when the
    next round would not fit, the study stops there and says so. The result returned is the last round,
    studied with its discretisation-error estimate.
    """
    h, res = case.discretization.max_segment, case.surface.resolution
    current = run_study(case, estimate_error=False, screen_drop=False)
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
        current = run_study(trial, estimate_error=False, screen_drop=False)
        rounds.append(_round(current))
        if _change(rounds[-2], rounds[-1]) < tolerance:
            converged = True
            break
    else:
        note = f"not settled within {max_rounds} rounds"
    if progress:
        progress("converge", 1.0)
    final = run_study(refined(case, h, res), progress)
    if converged:
        note = (f"settled: the worst voltages changed by {_change(rounds[-2], rounds[-1]) * 100:.2f} % from "
                f"max_segment {2 * h:g} m, map {2 * res:g} m to {h:g} m, {res:g} m")
    conv = Convergence(tuple(rounds), converged, tolerance, note)
    return replace(final, convergence=conv), conv


def combine_scenarios(results: list[StudyResult]) -> StudyResult:
    """The first result, with every scenario's result attached and the checks of the governing scenario."""
    def worst(name: str) -> Check:
        return least_margin([replace(getattr(r, name), scenario=r.scenario) for r in results])

    first = results[0]
    return replace(first, touch_check=worst("touch_check"), step_check=worst("step_check"),
                   mesh_check=worst("mesh_check"), scenarios=tuple(results))


def _run_condition(case: Case, progress, estimate_error: bool, units: dict, screen_drop: bool = True) -> StudyResult:
    """One condition: solve (or re-use the solve of an equal geometry) and judge."""
    key = geometry_key(case)
    if key not in units:
        units[key] = solve_geometry(case, progress, estimate_error, screen_drop)
    unit = units[key]
    segments, solution = unit.segments, unit.solution
    fault = case.fault
    df = decrement_factor(fault.x_over_r, fault.frequency, fault.clearing_time)
    division = None
    if fault.split_network is not None:
        zg = solution.metal.solution.impedance if solution.metal is not None else complex(solution.resistance)
        division = current_division(fault.split_network, zg)
        fault = replace(fault, split_factor=division.split_factor, split_basis=division.basis)
        case = replace(case, fault=fault)
    ig = df * fault.split_factor * fault.current
    gpr = ig * solution.resistance
    currents = solution.currents(ig)
    if np.iscomplexobj(currents):
        currents = np.abs(currents)                        # phasor magnitudes for the outputs
    surface = unit.surface.scaled(gpr)
    judged = tuple(_judge(case, standard, surface, segments, solution, gpr, ig) for standard in case.criteria.standards)
    first = judged[0]
    zones, touch, step, mesh, separate = first.zones, first.touch, first.step, first.mesh, first.separate
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
    drop = unit.drop
    if drop is not None and drop.fraction is not None and drop.estimated and drop.fraction > DROP_WARNING:
        x, y, _ = drop.feed
        warnings.append(f"CONDUCTOR IMPEDANCE: the metal is not one equipotential: its potential may drop by "
                        f"{100 * drop.fraction:.1f} % of the GPR from the feed point ({x:.1f}, {y:.1f}) m across the "
                        f"metal ({drop.note}); touch voltages near the feed point can be larger than this study's; "
                        "set electrodes.conductor_impedance: true and give fault.injection")
    if solution.metal is not None:
        warnings.extend(_impedance_notes(case, segments, solution))
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
    return StudyResult(case=case, segments=segments, kernel=unit.kernel, solution=solution, decrement_factor=df,
                       grid_current=ig, ground_potential_rise=gpr, segment_currents=currents, surface=surface,
                       limits=governing_limits, simplified=simplified_method(case, ig), conductor=conductor,
                       discretization_error=unit.error, timings=dict(unit.timings),
                       warnings=tuple(warnings), zones=zones, touch_check=touch, step_check=step, mesh_check=mesh,
                       separate=separate, contours=contours, criteria=judged, metal_drop=drop,
                       current_division=division)


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
    zones = tuple(ZoneVerdict(z, lim, weight, ext) for z, lim, ext in zip(case.zones, limits, surface.zones))
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
