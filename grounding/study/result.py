"""What a study computed: the result object of the Python API."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..case.model import Case
from ..cautions import CAUTIONS
from ..geometry.segments import Segments
from ..kernels import SoilKernel
from ..safety.conductor import ConductorCheck
from ..safety.current_division import CurrentDivision
from ..safety.ieee80 import Limits
from ..safety.simplified import SimplifiedResult
from ..safety.site import STANDARD_NAMES, Check, CriteriaResult, SeparateResult, ZoneVerdict
from ..solve.equipotential import Solution
from ..surface.results import SurfaceResult


@dataclass(frozen=True)
class DiscretizationError:
    """Estimate of the discretisation error of Rg from a second solve at twice the segment length.

    Attributes
    ----------
    coarse_resistance : float or None
        Rg at twice the segment length, Ω.
    estimate_ohm : float or None
        |Rg − Rg(2h)| / (r^p − 1), Ω, with r the refinement ratio and p the convergence order.
    relative : float or None
        estimate / Rg.
    note : str
        Why no estimate was made, when it was not.
    refinement_ratio : float or None
        Segments of the study over segments at twice the segment length (2 for a clean halving).
    order : float or None
        The convergence order assumed (1 for grids, lower with rods: see ``study.accuracy``).
    """

    coarse_resistance: float | None
    estimate_ohm: float | None
    relative: float | None
    note: str = ""
    refinement_ratio: float | None = None
    order: float | None = None


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


@dataclass(frozen=True)
class QuantityUncertainty:
    """σ of one result and the probability that its limit is exceeded.

    Attributes
    ----------
    value : float or None
        The nominal result (Ω or V).
    sigma : float or None
        1-σ in the result's unit, from σ(log y) (≈ relative σ × value for small σ).
    sigma_log : float or None
        σ of log y.
    probability_exceeds_limit : float or None
        P(worst / limit > 1) under the log-normal model; None for Rg and GPR.
    sensitivities : tuple of float
        ∂ log y / ∂ log p_j per soil parameter.
    """

    value: float | None
    sigma: float | None
    sigma_log: float | None
    probability_exceeds_limit: float | None
    sensitivities: tuple[float, ...]


@dataclass(frozen=True)
class SoilUncertaintyResult:
    """What the soil uncertainty does to the results.

    Attributes
    ----------
    source : str
        Where the parameter uncertainty came from.
    parameters : tuple of str
        Names of the soil parameters (ρ1, h1, …) in the order of the sensitivities.
    sigma_log : tuple of float
        σ of each log-parameter.
    quantities : dict of str to QuantityUncertainty
        ``grid_resistance``, ``ground_potential_rise``, ``touch``, ``step``, ``mesh``.
    extra_solves : int
        Solves the propagation cost (one per soil parameter, less the resistivity Euler's theorem gives).
    seconds : float
        Time it took, s.
    model : str
        The statistical model, in words.
    level : str
        The discretisation the sensitivities were taken at, in words.
    scope : str
        Which condition the values and probabilities are of and what the other scenarios take from them, in words
        ("" without scenarios).
    scenario_probabilities : tuple of (str, dict)
        For each scenario with the as-written case's solve: its name and P(limit exceeded) of its own touch, step and
        mesh checks (None where its worst point is elsewhere than the case's, so no sensitivity was taken there).
    """

    source: str
    parameters: tuple[str, ...]
    sigma_log: tuple[float, ...]
    quantities: dict
    extra_solves: int
    seconds: float
    model: str = ("soil parameters log-normal; each result log-normal with σ(log y)² = Sᵀ C S (first order), S from "
                  "forward differences in the log-parameters with the worst voltages re-evaluated at their own "
                  "places and neighbourhoods, and Σ S_ρ = 1 for a soil whose resistivities set the only scale "
                  "(Euler's theorem); P = Φ(log(worst/limit) / σ)")
    level: str = "sensitivities at the study's own segment length"
    scope: str = ""
    scenario_probabilities: tuple = ()



@dataclass(frozen=True)
class ElectricalResult:
    """The solved electrode system at the case's fault current.

    Attributes
    ----------
    segments : Segments
        The discretisation.
    kernel : SoilKernel
        The soil's Green's function.
    solution : Solution
        The solve (per volt of GPR): currents, Rg, separate-electrode potentials, the metal network.
    segment_currents : ndarray
        Leakage current of each segment at the grid current, A (magnitudes for phasors).
    decrement_factor : float
        Df.
    grid_current : float
        IG = Df · Sf · 3I0, A.
    ground_potential_rise : float
        GPR = IG · Rg, V (at the injection point with conductor impedance).
    current_division : CurrentDivision or None
        Sf and path currents when ``fault.split`` lists lines and cables.
    metal_drop : MetalDrop or None
        How far the metal's potential drops (coupled solution, or the screening estimate).
    """

    segments: Segments
    kernel: SoilKernel
    solution: Solution
    segment_currents: np.ndarray
    decrement_factor: float
    grid_current: float
    ground_potential_rise: float
    current_division: CurrentDivision | None = None
    metal_drop: MetalDrop | None = None


@dataclass(frozen=True)
class SafetyResult:
    """The verdicts: per standard, and the governing checks over zones (and scenarios, when combined).

    Attributes
    ----------
    criteria : tuple of CriteriaResult
        One per standard asked for; the first one's verdicts are the summary's.
    touch_check, step_check, mesh_check : Check
        The governing (least margin) zone's check of the first standard; over every scenario in a combined
        result.
    limits : Limits
        The first standard's limits in the governing touch zone.
    simplified : SimplifiedResult
        IEEE Std 80's simplified method beside the numerical result.
    """

    criteria: tuple[CriteriaResult, ...]
    touch_check: Check
    step_check: Check
    mesh_check: Check
    limits: Limits
    simplified: SimplifiedResult

    @property
    def zones(self) -> tuple[ZoneVerdict, ...]:
        """The first standard's verdict per surface zone."""
        return self.criteria[0].zones

    @property
    def separate(self) -> tuple[SeparateResult, ...]:
        """The first standard's verdict per separate electrode."""
        return self.criteria[0].separate


@dataclass(frozen=True)
class SolveOrigin:
    """Where a condition's solve came from.

    Attributes
    ----------
    key : str
        The solve's content key (SHA-256, hex) of :mod:`grounding.study.cache`.
    origin : str
        ``solved`` (solved in this run), ``shared`` (the solve of an earlier condition of this run with an equal
        key) or ``cache`` (kept from an earlier study: an earlier run, or a refinement round of this one).
    shared_with : str
        The condition whose solve was shared (``shared`` only).
    note : str
        Why the solve was not kept or a kept one not used, when so.
    """

    key: str
    origin: str
    shared_with: str = ""
    note: str = ""

    def describe(self) -> str:
        """In words, e.g. "solve reused (key 3fa2c1d09be4, kept from an earlier study)"."""
        short = self.key[:12]
        if self.origin == "cache":
            return f"solve reused (key {short}, kept from an earlier study)"
        if self.origin == "shared":
            return f"solve shared with '{self.shared_with}'" + (f" (key {short})" if short else "")
        return f"solved (key {short})"


@dataclass(frozen=True)
class Diagnostics:
    """How the study was made and how sure it is.

    Attributes
    ----------
    discretization_error : DiscretizationError
        The estimate of Rg's discretisation error.
    timings : dict
        Stage timings, s.
    warnings : tuple of str
        Notes and warnings for the reader.
    convergence : Convergence or None
        The rounds of ``--converge``, when run.
    solve : SolveOrigin or None
        Where the solve came from (solved, shared with another condition, or kept from an earlier run).
    """

    discretization_error: DiscretizationError
    timings: dict
    warnings: tuple[str, ...]
    convergence: Convergence | None = None
    solve: SolveOrigin | None = None


def _alias(group: str, name: str, topic: str):
    """A read-only property for an attribute that moved into a topic group (kept for one release)."""
    def get(self):
        return getattr(getattr(self, group), name)
    return property(get, doc=f"The same as ``.{group}.{name}`` ({topic}; this name is kept for one release).")


@dataclass(frozen=True)
class StudyResult:
    """Everything a study computed, grouped by topic. Currents in A, voltages in V, resistances in Ω, lengths in m.

    Attributes
    ----------
    case : Case
        The case as studied (with Sf from the current division where computed).
    electrical : ElectricalResult
        Segments, kernel, solution, currents, Df, IG, GPR, current division, metal drop.
    surface : SurfaceResult
        Maps and worst points at the case's GPR, with the contour lines asked for.
    safety : SafetyResult
        Criteria per standard, governing checks, limits, the simplified method.
    conductor : ConductorCheck
        Conductor sizing for the fault heat.
    diagnostics : Diagnostics
        Discretisation-error estimate, timings, warnings, ``--converge`` rounds.
    scenario : str
        The scenario's name ("" without scenarios).
    scenarios : tuple of StudyResult
        Every scenario's result, the case as written first (empty without scenarios).
    uncertainty : SoilUncertaintyResult or None
        The soil uncertainty carried to the results, where the soil's uncertainty is known.
    cautions : tuple of str
        The cautions every output carries.
    """

    case: Case
    electrical: ElectricalResult
    surface: SurfaceResult
    safety: SafetyResult
    conductor: ConductorCheck
    diagnostics: Diagnostics
    scenario: str = ""
    scenarios: tuple["StudyResult", ...] = ()
    uncertainty: SoilUncertaintyResult | None = None
    cautions: tuple[str, ...] = CAUTIONS

    segments = _alias("electrical", "segments", "solution")
    kernel = _alias("electrical", "kernel", "solution")
    solution = _alias("electrical", "solution", "solution")
    segment_currents = _alias("electrical", "segment_currents", "solution")
    decrement_factor = _alias("electrical", "decrement_factor", "solution")
    grid_current = _alias("electrical", "grid_current", "solution")
    ground_potential_rise = _alias("electrical", "ground_potential_rise", "solution")
    current_division = _alias("electrical", "current_division", "solution")
    metal_drop = _alias("electrical", "metal_drop", "solution")
    criteria = _alias("safety", "criteria", "criteria")
    touch_check = _alias("safety", "touch_check", "criteria")
    step_check = _alias("safety", "step_check", "criteria")
    mesh_check = _alias("safety", "mesh_check", "criteria")
    limits = _alias("safety", "limits", "criteria")
    simplified = _alias("safety", "simplified", "criteria")
    zones = _alias("safety", "zones", "criteria")
    separate = _alias("safety", "separate", "criteria")
    contours = _alias("surface", "contours", "surface")
    discretization_error = _alias("diagnostics", "discretization_error", "diagnostics")
    timings = _alias("diagnostics", "timings", "diagnostics")
    warnings = _alias("diagnostics", "warnings", "diagnostics")
    convergence = _alias("diagnostics", "convergence", "diagnostics")

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

    def failures(self) -> list[str]:
        """Every criterion that fails, in words, with the zone, element and scenarios that fail it (empty when all
        pass); a criterion failing in several scenarios is named once with all of them."""
        names = STANDARD_NAMES
        out = []
        for name, check in (("touch", self.touch_check), ("step", self.step_check), ("mesh", self.mesh_check)):
            if check.ok is False:
                where = [f"zone '{check.zone}'"] if check.zone else []
                where += [f"governing scenario '{check.scenario}'"] if check.scenario else []
                out.append(f"{name} voltage" + (f" ({', '.join(where)})" if where else "")
                           + ("" if check.worst is not None else ": evaluated nowhere"))
        grouped: dict[str, list[str]] = {}                  # failure in words → the scenarios it fails in
        for r in (self.scenarios or (self,)):
            for c in r.criteria:
                standard = names.get(c.standard, c.standard)
                for e in c.separate:
                    if not e.touch.ok:
                        grouped.setdefault(f"touch near '{e.name}' under {standard}", []).append(r.scenario)
                if c is not r.criteria[0]:
                    for name, check in (("touch", c.touch), ("step", c.step), ("mesh", c.mesh)):
                        if check.ok is False:
                            grouped.setdefault(f"{name} voltage under {standard}", []).append(r.scenario)
            cc = r.conductor
            if not cc.ok:
                grouped.setdefault(f"conductor sizing ({cc.element or 'the conductors'}: "
                                   f"{cc.actual_area_mm2:.1f} mm² installed", []).append(
                    f"{r.scenario}: {cc.required_area_mm2:.1f} mm² needed" if r.scenario else
                    f"{cc.required_area_mm2:.1f} mm² needed")
        for text, where in grouped.items():
            scen = [w for w in where if w]
            if text.startswith("conductor sizing"):
                out.append(f"{text}; {'; '.join(scen)})")
            elif scen and self.scenarios and len(scen) == len(self.scenarios):
                out.append(f"{text} (every scenario)")
            else:
                out.append(text + (f" (scenario{'s' if len(scen) > 1 else ''} {', '.join(repr(w) for w in scen)})"
                                   if scen else ""))
        return out

    @property
    def body_weight(self) -> int:
        """Body weight the verdicts use, kg (zones may set their own: :attr:`body_weights`)."""
        return self.case.criteria.body_weight

    @property
    def body_weights(self) -> str:
        """The body weights of the verdicts in words: '70 kg', or '70 kg; 50 kg in outside' when zones set their
        own."""
        own = [(z.name, z.body_weight) for z in self.zones if z.zone.body_weight is not None
               and z.body_weight != self.body_weight]
        return f"{self.body_weight} kg" + "".join(f"; {w} kg in {n}" for n, w in own)

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
