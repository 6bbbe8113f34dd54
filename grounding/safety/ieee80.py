"""IEEE Std 80 formulas for tolerable touch and step voltages and the grid current.

Equation forms as in IEEE Std 80-2013 (clauses 7, 8 and 15): the surface-layer derating factor Cs,
Dalziel's body-current limit, the tolerable touch and step voltages, and the decrement factor Df.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

#: Dalziel's constant k in Ib = k/√ts, A·√s, per body weight in kg (IEEE Std 80, clause 5).
DALZIEL_K = {50: 0.116, 70: 0.157}


def surface_layer_factor(soil_resistivity: float, surface_resistivity: float, thickness: float) -> float:
    """Surface-layer derating factor Cs = 1 − 0.09 (1 − ρ/ρs) / (2 hs + 0.09) (dimensionless).

    Parameters
    ----------
    soil_resistivity : float
        ρ of the soil beneath the surface layer, Ω·m.
    surface_resistivity : float
        ρs of the surface layer, Ω·m.
    thickness : float
        hs, m.
    """
    return 1.0 - 0.09 * (1.0 - soil_resistivity / surface_resistivity) / (2.0 * thickness + 0.09)


def body_current_limit(body_weight: int, shock_duration: float) -> float:
    """Dalziel's tolerable body current Ib = k/√ts, A (valid for 0.03 s ≤ ts ≤ 3 s)."""
    return DALZIEL_K[body_weight] / math.sqrt(shock_duration)


def tolerable_touch_voltage(cs: float, surface_resistivity: float, shock_duration: float,
                            body_weight: int) -> float:
    """E_touch = (1000 + 1.5 Cs ρs) k/√ts, V (1000 Ω body resistance, two feet in parallel)."""
    return (1000.0 + 1.5 * cs * surface_resistivity) * body_current_limit(body_weight, shock_duration)


def tolerable_step_voltage(cs: float, surface_resistivity: float, shock_duration: float,
                           body_weight: int) -> float:
    """E_step = (1000 + 6 Cs ρs) k/√ts, V (1000 Ω body resistance, two feet in series)."""
    return (1000.0 + 6.0 * cs * surface_resistivity) * body_current_limit(body_weight, shock_duration)


def decrement_factor(x_over_r: float | None, frequency: float, clearing_time: float) -> float:
    """Df = √(1 + (Ta/tf)(1 − e^(−2 tf/Ta))), Ta = (X/R)/(2π f) (dimensionless); 1 without X/R."""
    if not x_over_r:
        return 1.0
    ta = x_over_r / (2.0 * math.pi * frequency)
    return math.sqrt(1.0 + ta / clearing_time * (1.0 - math.exp(-2.0 * clearing_time / ta)))


@dataclass(frozen=True)
class Limits:
    """Tolerable voltages and the quantities they came from.

    Attributes
    ----------
    cs : float
        Surface-layer derating factor (1 without a surface layer).
    surface_resistivity : float
        ρs used in the limits, Ω·m (the top soil when there is no surface layer).
    touch, step : dict of int to float
        Tolerable touch and step voltage per body weight (50, 70 kg), V; a step limit is None where the
        standard sets none.
    standard : str
        ``ieee80`` or ``en50522``.
    basis : object
        How the limit was obtained, for standards that need more than Cs and ρs (EN 50522: TouchBasis).
    """

    cs: float
    surface_resistivity: float
    touch: dict[int, float]
    step: dict[int, float | None]
    standard: str = "ieee80"
    basis: object = None


def tolerable_limits(top_soil_resistivity: float, surface_layer, shock_duration: float) -> Limits:
    """IEEE Std 80 tolerable touch and step voltages for 50 and 70 kg bodies.

    Parameters
    ----------
    top_soil_resistivity : float
        Resistivity of the soil under the surface layer, Ω·m.
    surface_layer : SurfaceLayer or None
        Crushed rock or similar; None means people stand on the native soil (Cs = 1).
    shock_duration : float
        ts, s.
    """
    if surface_layer is None:
        cs, rho_s = 1.0, top_soil_resistivity
    else:
        rho_s = surface_layer.resistivity
        cs = surface_layer_factor(top_soil_resistivity, rho_s, surface_layer.thickness)
    touch = {w: tolerable_touch_voltage(cs, rho_s, shock_duration, w) for w in DALZIEL_K}
    step = {w: tolerable_step_voltage(cs, rho_s, shock_duration, w) for w in DALZIEL_K}
    return Limits(cs, rho_s, touch, step)
