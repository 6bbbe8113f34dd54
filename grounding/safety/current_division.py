"""The split factor Sf from the paths that carry fault current away from the grid: overhead-line shield
wires with their tower footings, and cable screens earthed at the far end.

Method (the current-division method for shield wires of long lines, Endrenyi 1963, as used in the annex
of IEEE Std 80 on current division; recalled from memory):

- Each shield wire with its tower footings is a ladder network: span impedance Zs = z_s · span length in
  series, footing resistance Rt to earth at every tower. Its driving-point impedance Z_line is computed
  exactly for the given number of spans (the far end ends in a tower footing); for many spans it tends to
  Z∞ = Zs/2 + √(Zs·Rt + Zs²/4).
- The phase current arriving over a line induces in its shield wire, away from the line ends, the
  current κ·I with κ = z_m / z_s (mutual over self impedance per metre, both with earth return). That
  part returns to the source in the shield wire and never enters the soil here.
- The rest, I_r = I_f (1 − Σ κ_k s_k) (s_k the share of the fault current arriving over line k), divides
  between the grid (Zg), the line ladders and the cable screens (z_c · length + remote earthing) in
  inverse proportion to their impedances: I_g = I_r · (1/Zg) / (1/Zg + Σ 1/Z_line + Σ 1/Z_cable).

Sf = |I_g / I_f|. Coupling left out (not given) makes Sf larger: the conservative side. The long-line
coupling term is the limit far from the line ends; for lines of a few spans it overstates the induced part.
"""

from __future__ import annotations

import cmath
from dataclasses import dataclass


def ladder_impedance(span: complex, footing: float, spans: int) -> complex:
    """Driving-point impedance (Ω) of ``spans`` series impedances ``span`` with a shunt ``footing`` after each."""
    z = complex(footing)
    for _ in range(spans - 1):
        z = footing * (span + z) / (footing + span + z)
    return span + z


def infinite_ladder_impedance(span: complex, footing: float) -> complex:
    """Z∞ = Zs/2 + √(Zs·Rt + Zs²/4), Ω (the driving point of an endless ladder)."""
    return span / 2 + cmath.sqrt(span * footing + span * span / 4)


@dataclass(frozen=True)
class PathCurrent:
    """One path's current per ampere of fault current (complex) and its impedance, Ω; ``far_potential`` the
    potential (V per ampere of fault current, complex) of where the path meets the earth away from this site:
    a cable's far-end earthing (its current through the remote earth resistance), a line's first tower footing
    (the current that leaves the shield wire into the footings, through the ladder beyond the first span) —
    transferred potentials outside the grid that this study does not map."""

    name: str
    kind: str
    impedance: complex
    current: complex
    far_potential: complex = 0j


@dataclass(frozen=True)
class CurrentDivision:
    """Sf and the current in every path, per ampere of fault current.

    Attributes
    ----------
    split_factor : float
        |I_g / I_f|.
    grid : complex
        I_g / I_f.
    paths : tuple of PathCurrent
        Each line and cable, current per ampere of fault current.
    grid_impedance : complex
        Zg used, Ω.
    basis : str
        The method and its inputs in words.
    """

    split_factor: float
    grid: complex
    paths: tuple[PathCurrent, ...]
    grid_impedance: complex
    basis: str


def current_division(network, grid_impedance: complex) -> CurrentDivision:
    """Divide the fault current between the grid and the lines and cables of a
    :class:`grounding.case.SplitNetwork` (see the module text)."""
    paths, induced, beyond = [], [], []
    for line in network.lines:
        span = line.shield_impedance * line.span_length
        z = ladder_impedance(span, line.footing_resistance, line.spans)
        kappa = line.coupling / line.shield_impedance
        paths.append(PathCurrent(line.name, "line", z, 0j))
        induced.append(kappa * line.share)
        beyond.append(z - span)                          # the ladder seen from the first tower
    for cable in network.cables:
        paths.append(PathCurrent(cable.name, "cable", cable.screen_impedance * cable.length +
                                 cable.remote_earth_resistance, 0j))
        beyond.append(complex(cable.remote_earth_resistance))
    rest = 1.0 - sum(induced)
    admittance = 1.0 / grid_impedance + sum(1.0 / p.impedance for p in paths)
    grid = rest / grid_impedance / admittance
    out = []
    for k, p in enumerate(paths):
        own = induced[k] if k < len(induced) else 0.0
        conducted = rest / p.impedance / admittance          # the part that reaches the earth along the path
        out.append(PathCurrent(p.name, p.kind, p.impedance, own + conducted, conducted * beyond[k]))
    names = "; ".join(f"{p.name} ({p.kind}) |Z| {abs(p.impedance):.3g} Ω" for p in out)
    basis = (f"Sf = |I_g / I_f| = {abs(grid):.3f} from the current-division method for shield wires (Endrenyi 1963, "
             f"as in the IEEE Std 80 annex on current division): Zg {abs(grid_impedance):.3g} Ω in parallel with "
             f"{names}; shield-wire coupling takes {abs(sum(induced)):.3f} of the current back in the wires")
    return CurrentDivision(float(abs(grid)), complex(grid), tuple(out), complex(grid_impedance), basis)
