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
from ..safety.site import Check, CriteriaResult, SeparateResult, ZoneVerdict
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
