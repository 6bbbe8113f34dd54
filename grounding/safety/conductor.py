"""Minimum conductor cross-section for the fault current (IEEE Std 80, clause 11, SI form)."""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..materials import Material


def minimum_area_mm2(current_ka: float, duration: float, material: Material, ambient: float,
                     max_temperature: float) -> float:
    """A = I / √( (TCAP·1e-4 / (tc αr ρr)) · ln((K0 + Tm)/(K0 + Ta)) ), mm².

    Parameters
    ----------
    current_ka : float
        rms fault current in the conductor, kA.
    duration : float
        Current duration tc, s.
    material : Material
        Constants from the IEEE Std 80 material table.
    ambient : float
        Ta, °C.
    max_temperature : float
        Tm, maximum allowable temperature, °C.
    """
    factor = (material.tcap * 1e-4 / (duration * material.alpha_r * material.rho_r)) * \
        math.log((material.k0 + max_temperature) / (material.k0 + ambient))
    return current_ka / math.sqrt(factor)


@dataclass(frozen=True)
class ConductorCheck:
    """Conductor sizing result.

    Attributes
    ----------
    current_a : float
        Current used for sizing, A (Df · 3I0: the whole asymmetrical fault current may flow in one
        conductor near the fault point).
    required_area_mm2, actual_area_mm2 : float
        Minimum and smallest actual cross-section, mm².
    max_temperature : float
        Tm used, °C.
    ok : bool
        True when the smallest conductor is at least the required area.
    element, material : str
        The governing element (case-file key) and its material.
    scenario : str
        The scenario whose fault governs (empty without scenarios).
    """

    current_a: float
    required_area_mm2: float
    actual_area_mm2: float
    max_temperature: float
    ambient_temperature: float
    ok: bool
    element: str = ""
    material: str = ""
    scenario: str = ""


def check_conductor(current_a: float, duration: float, material: Material, ambient: float,
                    max_temperature: float | None, smallest_diameter: float,
                    smallest_area: float | None = None, element: str = "") -> ConductorCheck:
    """Compare a conductor with the minimum area for the fault heat: its nominal cross-section (m², e.g. of a
    stranded conductor) when given, else the circle of its diameter (m). Tm is the material's fusing
    temperature, or ``max_temperature`` when that is lower."""
    tm = material.fusing_temperature if max_temperature is None else min(max_temperature, material.fusing_temperature)
    need = minimum_area_mm2(current_a / 1000.0, duration, material, ambient, tm)
    have = smallest_area * 1e6 if smallest_area is not None else math.pi * (smallest_diameter * 1000.0) ** 2 / 4.0
    return ConductorCheck(current_a, need, have, tm, ambient, have >= need, element, material.name)


def governing_conductor(checks: list[ConductorCheck]) -> ConductorCheck:
    """The element with the least area relative to what its material needs (ties: the first)."""
    return min(checks, key=lambda c: c.actual_area_mm2 / c.required_area_mm2)
