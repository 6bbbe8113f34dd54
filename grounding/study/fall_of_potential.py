"""The fall-of-potential commissioning test of IEEE Std 81, predicted and read: a current I enters the grid and
returns through a remote current rod; a potential probe moved along a traverse reads V(d) against the grid, and
V(d) / I is the apparent resistance.

The grid (+I) and the current rod (−I) are solved together in the case's soil, their mutual resistance included:
two solves with the same operator (grid at 1 V and rod at 0 V, then the other way round) give the 2 × 2 conductance
matrix of the two electrodes, and the potentials that carry +1 A and −1 A follow from it. The case's own separate
electrodes keep their connection (floating metal floats, remote metal stays at remote earth). Probe potentials are
the surface potential of the combined leakage currents, evaluated exactly at the probe points.

Not modelled (said in every output): the test leads' own mutual resistance and their a.c. coupling, the potential
probe's own resistance, and anything of the soil the case does not describe.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from ..case.model import Case, Rod, SeparateElectrode
from ..errors import GroundingError
from ..geometry.segments import segment
from ..kernels import make_kernel
from ..operators.potential import SurfacePotential
from ..solve.equipotential import solve_operator
from ..solve.policy import check_model_size
from ..solve.run import build_operator, connections, solve_case

#: Name of the current rod added to the case.
ROD_NAME = "test current rod"
#: The probe position of the textbook rule (a hemisphere in uniform soil), as a share of the current-rod distance.
RULE_618 = 0.618
#: Accuracies the current-rod distance is planned for (relative error of the 61.8 % reading).
PLAN_TOLERANCES = (0.01, 0.02, 0.05)
#: Current-rod distances tried when planning, in multiples of the grid's largest dimension.
PLAN_MULTIPLES = (1.0, 1.5, 2.0, 3.0, 4.0, 6.0, 8.0, 12.0)


@dataclass(frozen=True)
class TraverseCurve:
    """Apparent resistance along a traverse for one current-rod position (Ω per probe distance in m)."""

    rod_distance: float
    distances: np.ndarray
    apparent: np.ndarray
    grid_potential: float
    rod_potential: float


@dataclass(frozen=True)
class FallOfPotential:
    """A predicted fall-of-potential test.

    Attributes
    ----------
    true_resistance : float
        The grid's resistance to remote earth without the test electrodes (the study's Rg), Ω.
    start, rod : (x, y)
        Where the traverse starts (the leads' connection) and the current rod, m.
    direction_deg : float
        Direction of the probe traverse, degrees anticlockwise from +x.
    curve : TraverseCurve
        The apparent resistance at each probe distance.
    probe_distance_for_true : float or None
        Where the curve meets the true resistance, m (None when it does not within the probes).
    rule_618 : (float, float, float)
        Probe distance (m), apparent resistance (Ω) and its relative error at 61.8 % of the current-rod distance
        (along the rod's own direction).
    planning : dict of float to float or None
        Least current-rod distance (m, along the same direction, among PLAN_MULTIPLES of the grid's size) for which
        the 61.8 % reading is within each tolerance; None when none tried is.
    notes : tuple of str
        What the model leaves out, and anything the reader should know.
    """

    true_resistance: float
    start: tuple[float, float]
    rod: tuple[float, float]
    direction_deg: float
    curve: TraverseCurve
    probe_distance_for_true: float | None
    rule_618: tuple[float, float, float]
    planning: dict
    notes: tuple[str, ...]

    @property
    def along_rod(self) -> bool:
        """Whether the traverse runs toward the current rod (else the 61.8 % reading is taken on that line)."""
        toward = math.degrees(math.atan2(self.rod[1] - self.start[1], self.rod[0] - self.start[0]))
        return abs((self.direction_deg - toward + 180) % 360 - 180) < 1e-9


def with_current_rod(case: Case, rod_xy: tuple[float, float], length: float, diameter: float) -> Case:
    """The case with the test current rod added as a separate electrode (its own potential group), without
    scenarios."""
    rod = Rod((float(rod_xy[0]), float(rod_xy[1]), 0.0), float(length), float(diameter), key=ROD_NAME, name=ROD_NAME)
    extra = SeparateElectrode(ROD_NAME, "remote", rods=(rod,), key=ROD_NAME)
    return replace(case, separate_electrodes=tuple(case.separate_electrodes) + (extra,), scenarios=())


def _refuse_impedance(case: Case) -> None:
    if case.electrodes.conductor_impedance:
        raise GroundingError(f"{case.source}: the fall-of-potential prediction treats the grid as one equipotential; "
                             "set electrodes.conductor_impedance: false for it")


def traverse_currents(case: Case, rod_xy, length: float, diameter: float):
    """Segments, kernel, segment currents (A) and the grid's and rod's potentials (V) when +1 A enters the grid
    and leaves by the current rod."""
    _refuse_impedance(case)
    test = with_current_rod(case, rod_xy, length, diameter)
    segments = segment(test)
    check_model_size(test, segments)
    kernel = make_kernel(test.soil, test.discretization.max_segment)
    operator = build_operator(test, segments, kernel)
    conn = connections(test)
    k = len(conn) - 1                                     # the rod's group
    grid_on = solve_operator(operator, segments.group, conn)
    swapped = segments.group.copy()
    swapped[segments.group == 0], swapped[segments.group == k] = k, 0
    rod_on = solve_operator(operator, swapped, conn)
    # net currents (A) for 1 V on one electrode and 0 V on the other: a 2 × 2 conductance matrix
    c = np.array([[grid_on.group_current[0], rod_on.group_current[k]],
                  [grid_on.group_current[k], rod_on.group_current[0]]], float)
    vg, vr = np.linalg.solve(c, np.array([1.0, -1.0]))
    currents = vg * grid_on.currents_per_volt + vr * rod_on.currents_per_volt
    return segments, kernel, currents, float(vg), float(vr)


def traverse_points(start, direction_deg: float, distances: np.ndarray) -> np.ndarray:
    """Surface points (m) at ``distances`` from ``start`` along ``direction_deg``."""
    a = math.radians(direction_deg)
    return np.column_stack([start[0] + distances * math.cos(a), start[1] + distances * math.sin(a)])


def apparent_curve(case: Case, start, rod_xy, distances, direction_deg: float, length: float,
               diameter: float) -> TraverseCurve:
    """The apparent resistance (Ω) at each probe distance (m) for one current-rod position."""
    segments, kernel, currents, vg, vr = traverse_currents(case, rod_xy, length, diameter)
    distances = np.asarray(distances, float)
    v = SurfacePotential(segments, currents, kernel)(traverse_points(start, direction_deg, distances))
    rod_distance = float(math.hypot(rod_xy[0] - start[0], rod_xy[1] - start[1]))
    return TraverseCurve(rod_distance, distances, vg - v, vg, vr)


def _crossing(distances: np.ndarray, values: np.ndarray, target: float) -> float | None:
    """First distance where ``values`` crosses ``target`` (linear between probes), or None."""
    diff = values - target
    for i in range(len(diff) - 1):
        if diff[i] == 0:
            return float(distances[i])
        if diff[i] * diff[i + 1] < 0:
            return float(distances[i] + (distances[i + 1] - distances[i]) * diff[i] / (diff[i] - diff[i + 1]))
    return None


def check_test_layout(case: Case, start, rod_xy, probes, direction_deg) -> None:
    """Refuse a test layout the prediction cannot stand behind: a current rod inside (or within 2 m of) the
    grid's footprint, a probe at or beyond the current rod, a probe distance that is not positive."""
    import shapely
    _refuse_impedance(case)
    seg = segment(replace(case, separate_electrodes=(), scenarios=()))
    hull = shapely.MultiPoint(np.vstack([seg.start[:, :2], seg.end[:, :2]])).convex_hull
    if hull.buffer(2.0).contains(shapely.Point(rod_xy)):
        raise GroundingError(f"{case.source}: the current rod at ({rod_xy[0]:g}, {rod_xy[1]:g}) m is inside the "
                             "grid's footprint (or within 2 m of it); put it well outside, several grid diagonals "
                             "away (see the planning distances)")
    d_rod = math.hypot(rod_xy[0] - start[0], rod_xy[1] - start[1])
    if probes is not None:
        p = np.asarray(probes, float)
        if len(p) == 0 or not np.all(np.isfinite(p)) or np.any(p <= 0):
            raise GroundingError("--probes: give positive distances in m from --from, e.g. --probes 10,20,30")
        if direction_deg is None and np.any(p >= d_rod):
            raise GroundingError(f"--probes: {float(p.max()):g} m is at or beyond the current rod ({d_rod:g} m from "
                                 "--from along the traverse); give distances short of it")


def grid_size(case: Case) -> float:
    """The main electrodes' largest plan dimension (m): the diagonal of their footprint."""
    seg = segment(replace(case, separate_electrodes=(), scenarios=()))
    pts = np.vstack([seg.start[:, :2], seg.end[:, :2]])
    return float(np.linalg.norm(pts.max(axis=0) - pts.min(axis=0)))


def predict_test(case: Case, start, rod_xy, probes=None, direction_deg: float | None = None,
                 rod_length: float = 1.0, rod_diameter: float = 0.016, plan: bool = True) -> FallOfPotential:
    """Predict a fall-of-potential test of the case's grid (see the module docstring).

    Parameters
    ----------
    case : Case
        The study case (its scenarios are not used; its separate metal is).
    start : (x, y)
        Where the traverse starts, m (above the leads' connection to the grid).
    rod_xy : (x, y)
        The current rod, m.
    probes : sequence of float, optional
        Probe distances from ``start``, m; default 40 points up to the current rod along the traverse.
    direction_deg : float, optional
        Traverse direction, degrees anticlockwise from +x; default toward the current rod.
    rod_length, rod_diameter : float
        The current rod, m.
    plan : bool
        Also search the current-rod distance each accuracy of the 61.8 % reading needs.
    """
    start = (float(start[0]), float(start[1]))
    d_rod = math.hypot(rod_xy[0] - start[0], rod_xy[1] - start[1])
    check_test_layout(case, start, rod_xy, probes, direction_deg)
    toward = math.degrees(math.atan2(rod_xy[1] - start[1], rod_xy[0] - start[0]))
    direction = toward if direction_deg is None else float(direction_deg)
    distances = np.linspace(d_rod / 40, d_rod * 39 / 40, 39) if probes is None else np.asarray(probes, float)
    distances = np.append(distances, RULE_618 * d_rod) if direction == toward else distances
    true = solve_case(replace(case, scenarios=()))[2].resistance
    curve = apparent_curve(case, start, rod_xy, np.sort(np.unique(distances)), direction, rod_length, rod_diameter)
    # the 61.8 % reading, along the rod's own direction
    at = RULE_618 * d_rod
    if direction == toward:
        r618 = float(np.interp(at, curve.distances, curve.apparent))
    else:
        r618 = float(apparent_curve(case, start, rod_xy, [at], toward, rod_length, rod_diameter).apparent[0])
    planning = {}
    if plan:
        size = grid_size(case)
        unit = ((rod_xy[0] - start[0]) / d_rod, (rod_xy[1] - start[1]) / d_rod)
        errors = []
        for m in PLAN_MULTIPLES:
            d = m * size
            rod = (start[0] + d * unit[0], start[1] + d * unit[1])
            c = apparent_curve(case, start, rod, [RULE_618 * d], toward, rod_length, rod_diameter)
            errors.append((d, abs(c.apparent[0] / true - 1.0)))
        for tol in PLAN_TOLERANCES:
            planning[tol] = next((d for d, e in errors if e <= tol), None)
    notes = ("the test leads' mutual resistance and a.c. coupling between them are not modelled; nor is the "
             "potential probe's own resistance",
             f"the current rod ({rod_length:g} m × {rod_diameter * 1000:g} mm) is an electrode of the case's soil; "
             "the grid is one equipotential")
    return FallOfPotential(true, start, (float(rod_xy[0]), float(rod_xy[1])), direction, curve,
                           _crossing(curve.distances, curve.apparent, true),
                           (at, r618, r618 / true - 1.0), planning, notes)


@dataclass(frozen=True)
class MeasuredFit:
    """A measured curve read against the model: R_measured(d) ≈ k · R_model(d), k the soil resistivity scale
    (every resistivity times k scales every resistance by k).

    Attributes
    ----------
    scale : float
        k, and its standard error ``scale_error``.
    true_resistance, true_resistance_error : float
        k · Rg (the design model's Rg) and its standard error, Ω.
    residuals : ndarray
        Measured − fitted, Ω, at the measured distances.
    model : ndarray
        The model curve at the measured distances, Ω (k = 1).
    """

    scale: float
    scale_error: float
    true_resistance: float
    true_resistance_error: float
    residuals: np.ndarray
    model: np.ndarray


def fit_measured(case: Case, prediction: FallOfPotential, distances, resistances, rod_length: float = 1.0,
                 rod_diameter: float = 0.016) -> MeasuredFit:
    """Least squares of the measured apparent resistances (Ω at probe distances in m along the prediction's
    traverse) against the model curve with one free factor, the soil resistivity scale."""
    d = np.asarray(distances, float)
    r = np.asarray(resistances, float)
    model = apparent_curve(case, prediction.start, prediction.rod, d, prediction.direction_deg, rod_length,
                       rod_diameter).apparent
    k = float(model @ r / (model @ model))
    residuals = r - k * model
    dof = max(1, len(r) - 1)
    se = float(math.sqrt(residuals @ residuals / dof / (model @ model)))
    return MeasuredFit(k, se, k * prediction.true_resistance, se * prediction.true_resistance, residuals, model)


def parse_measured(text: str, file: str = "<readings>") -> tuple[np.ndarray, np.ndarray]:
    """A measured fall-of-potential curve from CSV text with the columns ``distance_m,resistance_ohm`` (comment
    lines start with #): distances (m) increasing, resistances (Ω) positive and finite. Every problem is a
    one-line :class:`~grounding.errors.CaseError` naming the file and row."""
    import csv

    from ..errors import CaseError
    lines = [(i + 1, line) for i, line in enumerate(text.splitlines()) if line.strip() and not line.lstrip().startswith("#")]
    if not lines:
        raise CaseError(file, None, "", "has no header row and no readings; give columns distance_m,resistance_ohm")
    head_line, head = lines[0]
    columns = [c.strip().lower() for c in next(csv.reader([head]))]
    if columns != ["distance_m", "resistance_ohm"]:
        raise CaseError(file, head_line, "header", f"must be 'distance_m,resistance_ohm', got '{head.strip()[:80]}'")
    d, r = [], []
    for number, line in lines[1:]:
        cells = next(csv.reader([line]))
        if len(cells) != 2:
            raise CaseError(file, number, "row", f"has {len(cells)} values; give distance_m,resistance_ohm")
        try:
            x, y = float(cells[0]), float(cells[1])
        except ValueError:
            raise CaseError(file, number, "row", f"'{line.strip()[:60]}' is not two numbers") from None
        if not (math.isfinite(x) and x > 0):
            raise CaseError(file, number, "distance_m", f"= {cells[0].strip()} must be a positive number of metres")
        if not (math.isfinite(y) and 0 < y < 1e6):
            raise CaseError(file, number, "resistance_ohm", f"= {cells[1].strip()} must be a positive resistance "
                                                            "below 1 MΩ")
        if d and x <= d[-1]:
            raise CaseError(file, number, "distance_m", f"= {x:g} m does not increase (the row before: {d[-1]:g} m); "
                                                        "list the readings in order of distance")
        d.append(x)
        r.append(y)
    if len(d) < 3:
        raise CaseError(file, None, "", f"has {len(d)} readings; give at least 3 to fit a curve")
    return np.array(d), np.array(r)


@dataclass(frozen=True)
class SlopeMethod:
    """The slope method of IEEE Std 81 (Tagg's): readings at 20, 40 and 60 % of the current-rod distance C give
    μ = (R₃ − R₂)/(R₂ − R₁), and the hemispherical model behind the method gives where the true value is read.

    Solved here from that model directly (not read from the printed table): an electrode whose electrical centre
    lies X behind the start, current rod at C, gives R(P) = R_T − k·[1/(C + X) + 1/(P + X) − 1/(C − P)], three
    unknowns R_T, k = ρ/2π and X fixed by the three readings.

    Attributes
    ----------
    mu : float
        The slope ratio.
    true_resistance : float or None
        R_T, Ω (None when μ lies outside what the model can give).
    probe_distance_for_true : float or None
        P_T, the probe distance (m) that reads R_T.
    note : str
        Why no estimate, when none.
    """

    mu: float
    true_resistance: float | None
    probe_distance_for_true: float | None
    note: str = ""


def slope_method(distances, resistances, rod_distance: float) -> SlopeMethod:
    """The slope-method estimate from a measured curve (Ω at probe distances in m; see :class:`SlopeMethod`)."""
    from scipy.optimize import brentq

    d, r, c = np.asarray(distances, float), np.asarray(resistances, float), float(rod_distance)
    at = np.array([0.2, 0.4, 0.6]) * c
    if d[0] > at[0] + 1e-9 or d[-1] < at[-1] - 1e-9:
        return SlopeMethod(float("nan"), None, None, "the readings do not span 20–60 % of the current-rod distance")
    r1, r2, r3 = np.interp(at, d, r)
    if r2 == r1:
        return SlopeMethod(float("nan"), None, None, "the readings at 20 % and 40 % are equal")
    mu = float((r3 - r2) / (r2 - r1))

    def f(p, x):
        return 1.0 / (c + x) + 1.0 / (p + x) - 1.0 / (c - p)

    def mu_of(x):
        f1, f2, f3 = (f(p, x) for p in at)
        return (f3 - f2) / (f2 - f1)

    lo, hi = 0.0, 100.0 * c
    g_lo, g_hi = mu_of(lo) - mu, mu_of(hi) - mu
    if g_lo * g_hi > 0:
        return SlopeMethod(mu, None, None, f"μ = {mu:.3f} lies outside what the hemispherical model gives "
                                           f"({mu_of(lo):.3f} to {mu_of(hi):.3f}); the curve has no usable slope")
    x = brentq(lambda v: mu_of(v) - mu, lo, hi, xtol=1e-10 * c)
    f1, f2 = f(at[0], x), f(at[1], x)
    k = -(r2 - r1) / (f2 - f1)
    true = float(r1 + k * f1)
    pt = brentq(lambda p: f(p, x), 1e-9 * c, c * (1 - 1e-9))
    return SlopeMethod(mu, true, float(pt))
