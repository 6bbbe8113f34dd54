"""Verdicts on a real site: tolerable limits per surface zone, the worst voltage of every zone against
its own limit, the governing zone of each criterion, and the touch voltages of separate electrodes.

A criterion passes only if it passes in every zone where it was evaluated; a criterion evaluated
nowhere does not pass (there is no evidence for it).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

from ..case.model import SurfaceZone
from ..surface.results import Extreme, ZoneExtremes
from .en50522 import DEFAULT_FOOTWEAR, prospective_touch_voltage
from .ieee80 import Limits, tolerable_limits

#: The standards' names as printed.
STANDARD_NAMES = {"ieee80": "IEEE Std 80", "en50522": "EN 50522"}


@dataclass(frozen=True)
class ZoneVerdict:
    """One surface zone: its limits and its worst touch, step and mesh voltages (V, None = none there).

    Attributes
    ----------
    zone : SurfaceZone
        The zone as given in the case (or the native soil, or the whole map).
    limits : Limits
        IEEE Std 80 tolerable voltages for people standing in the zone.
    body_weight : int
        kg, selects the limit the verdicts use.
    extremes : ZoneExtremes
        Worst touch, step and mesh voltages found in the zone.
    """

    zone: SurfaceZone
    limits: Limits
    body_weight: int
    extremes: ZoneExtremes

    @property
    def name(self) -> str:
        """Zone name."""
        return self.zone.name

    def label(self, cut: int | None = None) -> str:
        """The name as printed in tables (its first ``cut`` characters), with the body weight where the zone sets
        its own ('public (50 kg)')."""
        name = self.name[:cut]
        return name if self.zone.body_weight is None else f"{name} ({self.body_weight} kg)"

    @property
    def tolerable_touch(self) -> float:
        """V."""
        return self.limits.touch[self.body_weight]

    @property
    def tolerable_step(self) -> float | None:
        """V; None where the standard sets no step limit."""
        return self.limits.step[self.body_weight]

    def ok(self, criterion: str) -> bool | None:
        """Verdict of ``touch``, ``step`` or ``mesh`` in this zone; None where it was not evaluated or the
        standard sets no limit."""
        ext = getattr(self.extremes, criterion)
        limit = self.tolerable_step if criterion == "step" else self.tolerable_touch
        if ext is None or limit is None:
            return None
        return bool(ext.value <= limit)


@dataclass(frozen=True)
class Check:
    """The governing (least margin) result of one criterion over the zones.

    Attributes
    ----------
    worst : Extreme or None
        The governing zone's worst voltage (V) and where; None when the criterion was evaluated nowhere.
    limit : float
        That zone's tolerable voltage, V.
    ok : bool or None
        True when every zone passes; False when one fails or nothing was evaluated; None for the
        mesh voltage of a layout without closed meshes.
    zone : str
        Name of the governing zone.
    scenario : str
        Name of the governing scenario (empty without scenarios).
    """

    worst: Extreme | None
    limit: float | None
    ok: bool | None
    zone: str
    scenario: str = ""
    standard: str = "ieee80"

    @property
    def margin(self) -> float | None:
        """(limit − worst) / limit, or None (nothing evaluated, or no limit)."""
        return None if self.worst is None or self.limit is None else (self.limit - self.worst.value) / self.limit

    @property
    def error(self) -> float | None:
        """Estimated discretisation error of the worst voltage, V (segments by Richardson's estimate, plus the
        change seen with a map of twice the spacing; see :meth:`Extreme.error`); None if not made."""
        return None if self.worst is None else self.worst.error()

    @property
    def limit_within_error(self) -> bool:
        """True when the limit lies inside the worst voltage's error band: the verdict could flip."""
        e = self.error
        return e is not None and self.worst is not None and self.limit is not None and \
            abs(self.worst.value - self.limit) <= e


def zone_limits(top_soil_resistivity: float, zones: tuple[SurfaceZone, ...], shock_duration: float,
                standard: str = "ieee80", footwear: float = DEFAULT_FOOTWEAR) -> tuple[Limits, ...]:
    """Limits for every zone: the zone's covering, or the native soil.

    ``ieee80``: Dalziel's tolerable touch and step voltages with Cs (IEEE Std 80); ``en50522``: the
    prospective permissible touch voltage with footwear and the standing surface's resistance, no step limit.
    """
    if standard == "ieee80":
        return tuple(tolerable_limits(top_soil_resistivity, z.layer, shock_duration) for z in zones)
    out = []
    for z in zones:
        rho_s = top_soil_resistivity if z.layer is None else z.layer.resistivity
        basis = prospective_touch_voltage(shock_duration, footwear, rho_s)
        u = basis.prospective_touch_voltage_v
        out.append(Limits(1.0, rho_s, {50: u, 70: u}, {50: None, 70: None}, "en50522", basis))
    return tuple(out)


def governing(verdicts: tuple[ZoneVerdict, ...], criterion: str, needed: bool = True) -> Check:
    """The zone whose worst ``criterion`` voltage has the least margin to its limit.

    ``needed`` says whether a criterion evaluated nowhere fails (touch, step) or is not applicable
    (mesh voltage of a layout without meshes).
    """
    standard = verdicts[0].limits.standard

    def limit_of(v: ZoneVerdict):
        return v.tolerable_step if criterion == "step" else v.tolerable_touch

    checks = [Check(getattr(v.extremes, criterion), limit_of(v), v.ok(criterion), v.name, standard=standard)
              for v in verdicts if getattr(v.extremes, criterion) is not None]
    if not checks:
        first = verdicts[0]
        limit = limit_of(first)
        return Check(None, limit, False if needed and limit is not None else None, first.name, standard=standard)
    return least_margin(checks)


def least_margin(checks) -> Check:
    """Of several checks of one criterion (per zone, per scenario), the one with the least margin: the
    largest worst/limit (without a limit, the largest value). Its verdict is the verdict of them all: True
    only if every check with a verdict passes, None if none has one. Checks evaluated nowhere take no part in
    the choice but keep their failing verdict; when no check was evaluated, the first failing one (or the
    first) is returned as it is."""
    evaluated = [c for c in checks if c.worst is not None]
    if not evaluated:
        return next((c for c in checks if c.ok is False), checks[0])
    best, best_ratio = None, None
    for c in evaluated:
        ratio = c.worst.value / c.limit if c.limit is not None else c.worst.value
        if best_ratio is None or ratio > best_ratio:
            best, best_ratio = c, ratio
    oks = [c.ok for c in checks if c.ok is not None]
    return replace(best, ok=all(oks) if oks else None)


@dataclass(frozen=True)
class SeparateResult:
    """A separate electrode in the study.

    Attributes
    ----------
    name, connection : str
        As in the case.
    potential : float
        Its potential relative to remote earth, V.
    potential_fraction : float
        potential / GPR.
    net_current : float
        Net current it sends into the soil, A (0 when floating; negative when it draws current back to
        remote earth).
    touch : Check
        The governing touch voltage |V_metal − V_surface| within reach of it, over the zones.
    zone_touch : tuple of (str, Extreme or None, float)
        Per zone: name, worst touch voltage within reach, tolerable touch voltage (V).
    transferred : Extreme or None
        For metal tied to remote earth: the largest voltage between the metal (0 V) and the ground within
        reach of it, V, i.e. the largest surface potential there, over all zones; None otherwise.
    """

    name: str
    connection: str
    potential: float
    potential_fraction: float
    net_current: float
    touch: Check
    zone_touch: tuple
    transferred: Extreme | None

    @property
    def transferred_voltage(self) -> float | None:
        """For metal tied to remote earth: the largest voltage between it and the local ground, V."""
        return None if self.transferred is None else self.transferred.value


def separate_result(name: str, connection: str, potential: float, gpr: float, net_current: float,
                    touches: tuple[Extreme | None, ...], verdicts: tuple[ZoneVerdict, ...]) -> SeparateResult:
    """Collect one separate electrode's results and judge its touch voltages against each zone's limit."""
    per_zone = tuple(ZoneVerdict(v.zone, v.limits, v.body_weight, ZoneExtremes(t, None, None))
                     for v, t in zip(verdicts, touches))
    check = governing(per_zone, "touch")
    zone_touch = tuple((v.name, t, v.tolerable_touch) for v, t in zip(verdicts, touches))
    transferred = None
    if connection == "remote":
        for t in touches:
            if t is not None and (transferred is None or t.value > transferred.value):
                transferred = t
    return SeparateResult(name, connection, potential, potential / gpr if gpr else 0.0, net_current, check,
                          zone_touch, transferred)


@dataclass(frozen=True)
class CriteriaResult:
    """The verdicts of one standard: per zone, the governing check per criterion, separate electrodes."""

    standard: str
    zones: tuple[ZoneVerdict, ...]
    touch: Check
    step: Check
    mesh: Check
    separate: tuple[SeparateResult, ...]

    @property
    def passes(self) -> bool:
        """Touch passes everywhere; step and mesh do not fail (None: no limit, no meshes); separate metal passes."""
        return bool(self.touch.ok) and self.step.ok is not False and self.mesh.ok is not False and \
            all(e.touch.ok for e in self.separate)
