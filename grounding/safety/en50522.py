"""EN 50522 touch-voltage criteria: the permissible touch voltage U_Tp against the fault duration, and the
prospective permissible touch voltage with additional resistances (footwear and the standing surface).

Sources (values recalled from memory, to be checked against the standards before relying on them):

- U_Tp(tf): EN 50522:2010, Annex B (the curve of permissible touch voltage against fault duration, derived
  from the body current of IEC/TS 60479-1 curve c2 for a hand-to-feet path). Between the tabulated
  durations it is interpolated on log–log axes; outside 0.05–10 s the end values are held.
- Body impedance Z_B(U): IEC/TS 60479-1, Table 1, total body impedance for a hand-to-hand path, large
  contact areas, dry conditions, not exceeded by 50 % of the population. The hand-to-hand values are larger
  than hand-to-feet ones, so the body current U_Tp/Z_B and with it the allowance for additional
  resistances come out smaller: the conservative side.
- Additional resistance R_a = R_a1 + R_a2 with R_a1 the footwear (default 1000 Ω, worn wet shoes) and
  R_a2 = 1.5 m⁻¹ · ρs the standing surface (two feet in parallel), EN 50522 Annex B.
- Prospective permissible touch voltage U_vTp = U_Tp + R_a · I_B with I_B = U_Tp / Z_B(U_Tp).

EN 50522 sets no general step-voltage limit (a step limit follows from the touch limit in most cases);
the step voltage is reported without a verdict.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

#: Permissible touch voltage U_Tp (V) against fault duration tf (s), EN 50522 Annex B (recalled from memory).
UTP_TABLE = ((0.05, 716.0), (0.1, 654.0), (0.2, 537.0), (0.5, 220.0), (1.0, 117.0), (2.0, 96.0), (5.0, 86.0),
             (10.0, 85.0))
#: Total body impedance (Ω) against touch voltage (V), hand to hand, large contact areas, dry, 50 %
#: percentile, IEC/TS 60479-1 Table 1: two recollections (from memory, neither checked against the standard)
#: that disagree between 50 and 225 V. The first was this tool's table until 2026-12; the second a reviewer's
#: (1 275 Ω at 200 V, 1 225 Ω at 225 V).
BODY_IMPEDANCE_RECOLLECTIONS = (
    ((25.0, 3250.0), (50.0, 2625.0), (75.0, 2200.0), (100.0, 1875.0), (125.0, 1625.0), (150.0, 1425.0),
     (175.0, 1300.0), (200.0, 1200.0), (225.0, 1125.0), (400.0, 950.0), (500.0, 850.0), (700.0, 775.0),
     (1000.0, 775.0)),
    ((25.0, 3250.0), (50.0, 2500.0), (75.0, 2000.0), (100.0, 1725.0), (125.0, 1550.0), (150.0, 1400.0),
     (175.0, 1325.0), (200.0, 1275.0), (225.0, 1225.0), (400.0, 950.0), (500.0, 850.0), (700.0, 775.0),
     (1000.0, 775.0)),
)
#: The table used: at every voltage the larger of the two recollections. A larger Z_B gives a smaller body
#: current U_Tp/Z_B and so a smaller allowance for the footwear and the surface: the conservative side until
#: someone checks the standard. Above 1000 V the asymptotic 650 Ω.
BODY_IMPEDANCE_TABLE = tuple((a[0], max(a[1], b[1])) for a, b in zip(*BODY_IMPEDANCE_RECOLLECTIONS, strict=True))
#: How the table was chosen, printed beside the limits.
BODY_IMPEDANCE_BASIS = ("IEC/TS 60479-1 Table 1 (hand to hand, large contact areas, dry, 50 % of the population), "
                        "recalled from memory: where two recollections disagree (50–225 V) the larger Z_B, the "
                        "conservative one, is used until the table is checked against the standard")
BODY_IMPEDANCE_ASYMPTOTE = 650.0
#: Default footwear resistance R_a1, Ω (EN 50522 Annex B, worn wet shoes).
DEFAULT_FOOTWEAR = 1000.0
#: Standing-surface resistance per resistivity, R_a2 = 1.5 m⁻¹ · ρs (two feet in parallel).
SURFACE_FACTOR = 1.5


def permissible_touch_voltage(duration: float) -> float:
    """U_Tp (V) for a fault duration (s), interpolated on log–log axes between the tabulated points."""
    t = np.log([p[0] for p in UTP_TABLE])
    u = np.log([p[1] for p in UTP_TABLE])
    x = math.log(min(max(duration, UTP_TABLE[0][0]), UTP_TABLE[-1][0]))
    return float(math.exp(np.interp(x, t, u)))


def body_impedance(voltage: float) -> float:
    """Z_B (Ω) at a touch voltage (V), interpolated linearly between the tabulated points."""
    v = [p[0] for p in BODY_IMPEDANCE_TABLE]
    z = [p[1] for p in BODY_IMPEDANCE_TABLE]
    if voltage > v[-1]:
        return BODY_IMPEDANCE_ASYMPTOTE
    return float(np.interp(max(voltage, v[0]), v, z))


@dataclass(frozen=True)
class TouchBasis:
    """How one prospective permissible touch voltage was obtained (V, Ω, A, s)."""

    fault_duration_s: float
    permissible_touch_voltage_v: float
    body_impedance_ohm: float
    body_current_a: float
    footwear_resistance_ohm: float
    surface_resistance_ohm: float
    prospective_touch_voltage_v: float

    @property
    def additional_resistance_ohm(self) -> float:
        """R_a = R_a1 + R_a2, Ω."""
        return self.footwear_resistance_ohm + self.surface_resistance_ohm


def prospective_touch_voltage(duration: float, footwear: float, surface_resistivity: float) -> TouchBasis:
    """U_vTp = U_Tp + (R_a1 + 1.5 ρs) · U_Tp / Z_B(U_Tp), with its basis.

    Parameters
    ----------
    duration : float
        Fault duration tf, s.
    footwear : float
        R_a1, Ω.
    surface_resistivity : float
        ρs of what people stand on (a covering, or the native top soil), Ω·m.
    """
    utp = permissible_touch_voltage(duration)
    zb = body_impedance(utp)
    ib = utp / zb
    ra2 = SURFACE_FACTOR * surface_resistivity
    return TouchBasis(duration, utp, zb, ib, footwear, ra2, utp + (footwear + ra2) * ib)
