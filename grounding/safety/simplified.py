"""The IEEE Std 80 simplified method (clause 14.2 and 16.5): Sverak's grid resistance, mesh voltage Em
and step voltage Es with their Km, Ki, Ks, Kii, Kh and n factors, for one rectangular grid in uniform soil."""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..case.model import Case


def sverak_resistance(rho: float, total_length: float, area: float, depth: float) -> float:
    """Sverak's equation Rg = ρ [1/LT + 1/√(20A) (1 + 1/(1 + h √(20/A)))], Ω.

    Parameters
    ----------
    rho : float
        Soil resistivity, Ω·m.
    total_length : float
        LT, total buried conductor length including rods, m.
    area : float
        A, area occupied by the grid, m².
    depth : float
        h, grid depth, m.
    """
    return rho * (1.0 / total_length + 1.0 / math.sqrt(20.0 * area) *
                  (1.0 + 1.0 / (1.0 + depth * math.sqrt(20.0 / area))))


@dataclass(frozen=True)
class SimplifiedResult:
    """The simplified method's values, or the reason it does not apply.

    Attributes are in SI (Ω, V, m); ``reason`` is set and the values are None when not applicable.
    """

    applicable: bool
    reason: str = ""
    grid_resistance: float | None = None
    mesh_voltage: float | None = None
    step_voltage: float | None = None
    factors: dict | None = None


def mesh_and_step(rho: float, grid_current: float, lx: float, ly: float, nx: int, ny: int, depth: float,
                  diameter: float, rod_lengths: list[float], rods_on_perimeter: bool) -> dict:
    """Km, Ki, Ks, Kii, Kh, n, LC, LR, LM, LS and the resulting Em and Es (V) for a rectangular grid.

    Parameters
    ----------
    rho : float
        Soil resistivity, Ω·m.
    grid_current : float
        IG, A.
    lx, ly : float
        Grid sides, m.
    nx, ny : int
        Meshes along x and y.
    depth, diameter : float
        Grid depth and conductor diameter, m.
    rod_lengths : list of float
        Lengths of the rods, m.
    rods_on_perimeter : bool
        True when rods stand at the corners or along the perimeter.
    """
    h, d = depth, diameter
    D = max(lx / nx, ly / ny)
    lc = (ny + 1) * lx + (nx + 1) * ly
    lp = 2.0 * (lx + ly)
    area = lx * ly
    na = 2.0 * lc / lp
    nb = math.sqrt(lp / (4.0 * math.sqrt(area)))
    n = na * nb
    lr_total = float(sum(rod_lengths))
    lr = lr_total / len(rod_lengths) if rod_lengths else 0.0
    kh = math.sqrt(1.0 + h / 1.0)
    kii = 1.0 if (rod_lengths and rods_on_perimeter) else 1.0 / (2.0 * n) ** (2.0 / n)
    km = (1.0 / (2.0 * math.pi)) * (math.log(D ** 2 / (16 * h * d) + (D + 2 * h) ** 2 / (8 * D * d) - h / (4 * d))
                                     + kii / kh * math.log(8.0 / (math.pi * (2 * n - 1))))
    ki = 0.644 + 0.148 * n
    if rod_lengths and rods_on_perimeter:
        lm = lc + (1.55 + 1.22 * lr / math.sqrt(lx ** 2 + ly ** 2)) * lr_total
    else:
        lm = lc + lr_total
    ks = (1.0 / math.pi) * (1.0 / (2 * h) + 1.0 / (D + h) + (1.0 / D) * (1.0 - 0.5 ** (n - 2)))
    ls = 0.75 * lc + 0.85 * lr_total
    return {"D": D, "n": n, "na": na, "nb": nb, "Km": km, "Ki": ki, "Kii": kii, "Kh": kh, "Ks": ks,
            "LC": lc, "LR": lr_total, "LM": lm, "LS": ls, "LT": lc + lr_total, "A": area,
            "Em": rho * km * ki * grid_current / lm, "Es": rho * ks * ki * grid_current / ls}


def simplified_method(case: Case, grid_current: float) -> SimplifiedResult:
    """Apply the simplified method to a case, or say why it does not apply."""
    el = case.electrodes
    if not case.soil.is_uniform:
        return SimplifiedResult(False, "the soil is layered; the simplified method assumes uniform soil")
    if len(el.grids) != 1 or el.conductors:
        return SimplifiedResult(False, "the layout is not a single rectangular grid (with or without rods)")
    g = el.grids[0]
    (ox, oy), (lx, ly), (nx, ny) = g.origin, g.size, g.meshes
    tol = 1e-6
    rods_inside, on_perimeter = True, False
    for r in el.rods:
        x, y = r.top[0], r.top[1]
        if not (ox - tol <= x <= ox + lx + tol and oy - tol <= y <= oy + ly + tol):
            rods_inside = False
        if min(abs(x - ox), abs(x - ox - lx), abs(y - oy), abs(y - oy - ly)) < tol:
            on_perimeter = True
    if not rods_inside:
        return SimplifiedResult(False, "some rods stand outside the grid")
    f = mesh_and_step(case.soil.top_resistivity, grid_current, lx, ly, nx, ny, g.depth, g.diameter,
                      [r.length for r in el.rods], on_perimeter)
    limits = []
    if f["n"] > 25:
        limits.append(f"n = {f['n']:.1f} > 25")
    if not 0.25 <= g.depth <= 2.5:
        limits.append(f"depth {g.depth:g} m outside 0.25–2.5 m")
    if not g.diameter < 0.25 * g.depth:
        limits.append("conductor diameter not below a quarter of the depth")
    if not f["D"] > 2.5:
        limits.append(f"mesh spacing {f['D']:.2f} m not above 2.5 m")
    if limits:
        return SimplifiedResult(False, "outside the method's range: " + "; ".join(limits), factors=f)
    rg = sverak_resistance(case.soil.top_resistivity, f["LT"], f["A"], g.depth)
    return SimplifiedResult(True, "", rg, f["Em"], f["Es"], f)
