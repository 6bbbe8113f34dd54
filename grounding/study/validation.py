"""A short live validation table for the review report: the method against published closed forms.

Each check solves a small case with the same code path as a study and compares it with a published
formula; the test suite runs the same checks (tests/validation) with their sources.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..case.model import Case, Conductor, Criteria, Discretization, Electrodes, Fault, Layer, Rod, Soil
from ..geometry.segments import segment
from ..kernels import make_kernel
from ..operators.assembly import assemble
from ..safety.ieee80 import surface_layer_factor, tolerable_touch_voltage
from ..safety.simplified import mesh_and_step, sverak_resistance
from ..solve.equipotential import solve_equipotential


@dataclass(frozen=True)
class Check:
    """One validation row: what was compared, its source, the two values and the accepted deviation."""

    name: str
    source: str
    reference: float
    computed: float
    unit: str
    accepted: str

    @property
    def deviation(self) -> float:
        """(computed − reference) / reference."""
        return (self.computed - self.reference) / self.reference


def _rg(soil: Soil, conductors=(), rods=(), max_segment=0.5) -> float:
    case = Case(title="check", soil=soil, fault=Fault(1.0, 0.5, 0.5), criteria=Criteria(),
                electrodes=Electrodes("copper-annealed", conductors=tuple(conductors), rods=tuple(rods)),
                discretization=Discretization(max_segment))
    s = segment(case)
    return solve_equipotential(assemble(s, make_kernel(soil, max_segment))).resistance


def validation_checks() -> list[Check]:
    """Run the checks (about a second) and return the rows."""
    rho = 100.0
    uni = Soil((Layer(rho),))
    L, a = 3.0, 0.008
    rod = _rg(uni, rods=[Rod((0.0, 0.0, 0.0), L, 2 * a)], max_segment=0.25)
    dwight_rod = rho / (2 * math.pi * L) * (math.log(4 * L / a) - 1)
    D, d, s = 20.0, 0.01, 1.0
    t = np.linspace(0, 2 * np.pi, 97)
    ring = [Conductor((10 * math.cos(t[i]), 10 * math.sin(t[i]), 0.5), (10 * math.cos(t[i + 1]),
                      10 * math.sin(t[i + 1]), 0.5), d) for i in range(96)]
    mom_ring = _rg(uni, conductors=ring, max_segment=1.0)
    dwight_ring = rho / (2 * math.pi ** 2 * D) * (math.log(8 * D / d) + math.log(4 * D / s))
    wire = [Conductor((0.0, 0.0, 0.5), (20.0, 0.0, 0.5), 0.01)]
    two = _rg(Soil((Layer(rho, 2.0), Layer(rho * (1 + 1e-9)))), conductors=wire)
    one = _rg(uni, conductors=wire)
    cs = surface_layer_factor(400, 2500, 0.102)
    f = mesh_and_step(400, 1908, 70, 70, 10, 10, 0.5, 0.01, [], False)
    return [
        Check("Vertical rod 3 m, Rg", "Dwight 1936", dwight_rod, rod, "Ω",
              "0 to 1.5 % below (uniform current is an upper bound)"),
        Check("Buried ring D = 20 m, Rg", "Dwight 1936; Sunde 1949", dwight_ring, mom_ring, "Ω", "within 0.5 %"),
        Check("Two-layer kernel, equal resistivities", "uniform-soil solution", one, two, "Ω", "within 1e-5"),
        Check("Cs, Annex B example", "IEEE Std 80 Annex B (recalled)", 0.74, cs, "", "0.74 rounded"),
        Check("Touch limit 70 kg, Cs = 0.74", "IEEE Std 80 Annex B (recalled)", 838.2,
              tolerable_touch_voltage(0.74, 2500, 0.5, 70), "V", "within 0.1 V"),
        Check("Sverak Rg, Annex B grid", "IEEE Std 80 Annex B (recalled)", 2.78,
              sverak_resistance(400, 1540, 4900, 0.5), "Ω", "within 0.005 Ω"),
        Check("Mesh voltage Em, Annex B grid", "IEEE Std 80 Annex B (recalled)", 1002.6, f["Em"], "V",
              "within 0.2 %"),
    ]
