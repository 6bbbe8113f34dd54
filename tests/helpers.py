"""Small helpers for tests: solve a case given as YAML text."""

from __future__ import annotations

from grounding.case.load import parse_case
from grounding.geometry.segments import segment
from grounding.kernels import make_kernel
from grounding.operators.assembly import AssemblyOptions, assemble
from grounding.solve.equipotential import solve_equipotential
from tests.conftest import case_text


def resistance(electrodes: str, max_segment: float, soil: str = "{resistivity: 100}",
               options: AssemblyOptions = AssemblyOptions()) -> float:
    """Grid resistance (Ω) of the electrodes in the given soil."""
    case = parse_case(case_text(electrodes, soil=soil, extra=f"discretization: {{max_segment: {max_segment}}}\n"))
    s = segment(case)
    return solve_equipotential(assemble(s, make_kernel(case.soil, max_segment), options)).resistance


def ring_conductors(diameter: float, depth: float, wire: float, chords: int) -> str:
    """A ring as a closed polygon of straight conductors (YAML electrodes block)."""
    import numpy as np

    t = np.linspace(0.0, 2 * np.pi, chords + 1)
    x, y = diameter / 2 * np.cos(t), diameter / 2 * np.sin(t)
    rows = [f"  - {{start: [{x[i]:.12f}, {y[i]:.12f}, {depth}], end: [{x[i + 1]:.12f}, {y[i + 1]:.12f}, {depth}], "
            f"diameter: {wire}}}\n" for i in range(chords)]
    return "conductors:\n" + "".join(rows)
