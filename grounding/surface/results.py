"""Result types of the surface stage (worst points, maps, per-zone extremes) and the tie rule that makes worst points independent of rounding."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import shapely

#: Factor of safety on the discretisation-error estimates (Roache's grid convergence index, factor 1.25 where the
#: order of convergence is known from studies on three or more levels, as here: grids p = 1, rods p = 0.4; see
#: study/accuracy.py). Without it a two-level estimate missed the difference to a model four times finer on two
#: of the demo and golden cases' worst voltages (the worst point moves with the discretisation).
SAFETY_FACTOR = 1.25


@dataclass(frozen=True)
class Extreme:
    """A maximum over the surface: value (V) and location (x, y in m).

    ``map_check`` is the same maximum found from a map of twice the spacing, and ``segment_check`` the
    value at the same point from the solve at twice the segment length (both V; None when not made):
    the two sources of discretisation error of the value; ``richardson`` the factor that turns the
    difference to ``segment_check`` into an error estimate (see :meth:`error`).
    """

    value: float
    x: float
    y: float
    map_check: float | None = None
    segment_check: float | None = None
    richardson: float = 1.0

    def scaled(self, factor: float) -> "Extreme":
        """The same point with the value multiplied by ``factor``."""
        def sc(v):
            return None if v is None else v * factor
        return Extreme(self.value * factor, self.x, self.y, sc(self.map_check), sc(self.segment_check),
                       self.richardson)

    def error(self) -> float | None:
        """Estimated discretisation error of the value, V: |value − segment_check| · richardson (Richardson's
        estimate with its factor of safety; ``richardson`` = Fs/(r^p − 1) for the refinement ratio r and convergence
        order p of the two solves) plus Fs · |value − map_check| (map spacing, first order), Fs = SAFETY_FACTOR;
        None when neither check was made."""
        if self.map_check is None and self.segment_check is None:
            return None
        seg = 0.0 if self.segment_check is None else abs(self.value - self.segment_check) * self.richardson
        return seg + (0.0 if self.map_check is None else SAFETY_FACTOR * abs(self.value - self.map_check))


@dataclass(frozen=True)
class SurfaceResult:
    """Surface potentials and the touch, step and mesh voltages derived from them.

    Attributes
    ----------
    x, y : ndarray
        Map axes, m.
    potential : ndarray, shape (len(y), len(x))
        Surface potential, V.
    touch : ndarray, shape (len(y), len(x))
        Touch voltage GPR − potential inside the touch area, NaN outside, V.
    step : ndarray, shape (len(y), len(x))
        Largest potential difference to a point one step away, V.
    touch_area, meshes : shapely geometry
        Where touch voltage counts; the grid meshes.
    max_touch, max_step : Extreme
        Worst touch and step voltages.
    max_mesh : Extreme or None
        Worst touch voltage inside the meshes; None when the layout has no closed mesh.
    probe_potential : ndarray
        Surface potential at the case's probe points, V.
    profile : Profile
        Surface potential along the profile line.
    zones : tuple of ZoneExtremes
        Worst touch, step and mesh voltages per zone (one zone: the whole map).
    metal : tuple of MetalTouch
        Per separate electrode: worst touch voltage per zone within reach of it.
    zone_labels : ndarray of int, shape of the map
        The zone each map point stands in (index into ``zones``).
    probe_touch : ndarray or None
        Touch voltage at the probes, V, where it is not GPR − potential (conductors with impedance:
        |V_metal − V_surface| with the nearest energised metal); None otherwise.
    contours : tuple of (float, list of ndarray)
        Equipotential lines asked for by the case: (level in V, polylines of (x, y) in m); empty when none were
        asked for (a surface at 1 V of GPR carries none: lines are traced after scaling).
    """

    x: np.ndarray
    y: np.ndarray
    potential: np.ndarray
    touch: np.ndarray
    step: np.ndarray
    touch_area: shapely.Geometry
    meshes: shapely.Geometry
    max_touch: Extreme
    max_step: Extreme
    max_mesh: Extreme | None
    probe_potential: np.ndarray
    profile: "Profile"
    zones: tuple["ZoneExtremes", ...] = ()
    metal: tuple["MetalTouch", ...] = ()
    zone_labels: np.ndarray | None = None
    probe_touch: np.ndarray | None = None
    contours: tuple = ()

    def scaled(self, factor: float) -> "SurfaceResult":
        """Every voltage multiplied by ``factor`` (fields are linear in the GPR; locations are unchanged)."""
        p = self.profile
        return SurfaceResult(self.x, self.y, self.potential * factor, self.touch * factor, self.step * factor,
                             self.touch_area, self.meshes, _scale(self.max_touch, factor),
                             _scale(self.max_step, factor), _scale(self.max_mesh, factor),
                             self.probe_potential * factor, Profile(p.distance, p.x, p.y, p.potential * factor),
                             tuple(z.scaled(factor) for z in self.zones), tuple(m.scaled(factor) for m in self.metal),
                             self.zone_labels, None if self.probe_touch is None else self.probe_touch * factor,
                             tuple((level * factor, lines) for level, lines in self.contours))


def _scale(ext: "Extreme | None", factor: float) -> "Extreme | None":
    return None if ext is None else ext.scaled(factor)


@dataclass(frozen=True)
class ZoneExtremes:
    """Worst voltages within one zone (V, at x, y in m); None where the zone holds no such place.

    A step belongs to the zone of the foot with the more severe (lower) limit.
    """

    touch: Extreme | None
    step: Extreme | None
    mesh: Extreme | None

    def scaled(self, factor: float) -> "ZoneExtremes":
        """The same points with values multiplied by ``factor``."""
        return ZoneExtremes(_scale(self.touch, factor), _scale(self.step, factor), _scale(self.mesh, factor))


@dataclass(frozen=True)
class MetalTouch:
    """Touch voltages |V_metal − V_surface| within reach of one separate electrode, per zone (V)."""

    touch: tuple[Extreme | None, ...]

    def scaled(self, factor: float) -> "MetalTouch":
        """The same points with values multiplied by ``factor``."""
        return MetalTouch(tuple(_scale(t, factor) for t in self.touch))


@dataclass(frozen=True)
class SeparateMetal:
    """What the surface stage needs of a separate electrode: the segments it owns and its potential (V)."""

    mask: np.ndarray
    potential: float


@dataclass(frozen=True)
class Profile:
    """Surface potential along a straight line: distance along it, x, y (m) and potential (V)."""

    distance: np.ndarray
    x: np.ndarray
    y: np.ndarray
    potential: np.ndarray


def largest(extremes) -> Extreme | None:
    """The largest of some extremes (None entries skipped), ties broken by position."""
    best = None
    for e in extremes:
        if e is not None and (best is None or beats(e.value, e.x, e.y, best)):
            best = e
    return best


#: Values closer than this (relative) are ties, broken by position, so that symmetric layouts report
#: the same point whatever the rounding of the machine or the BLAS threads.
TIE = 1e-9


def top_candidates(values: np.ndarray, X: np.ndarray, Y: np.ndarray, count: int = 3) -> np.ndarray:
    """Indices of the largest values, ties (within TIE) ordered by y, then x."""
    flat = values.ravel()
    finite = np.isfinite(flat)
    top = np.max(np.abs(flat[finite])) if finite.any() else 1.0
    q = np.where(finite, np.round(flat / (top * TIE + 1e-300)), -np.inf)
    return np.lexsort((X.ravel(), Y.ravel(), -q))[:count]


def beats(value: float, x: float, y: float, best: Extreme) -> bool:
    """Whether (value, x, y) beats ``best``: larger beyond TIE, or tied and first by y, then x."""
    scale = max(abs(value), abs(best.value), 1e-300) * TIE
    if value > best.value + scale:
        return True
    return abs(value - best.value) <= scale and (round(y, 6), round(x, 6)) < (round(best.y, 6), round(best.x, 6))
