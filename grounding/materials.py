"""Conductor material constants of IEEE Std 80 (Table 1), used for conductor sizing.

Values as in IEEE Std 80-2013, Table 1 (recalled from memory; cross-checked against the
copper constants used in the standard's Annex B example, which give the same kcmil/kA factors).
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Material:
    """Thermal and electrical constants of a conductor material.

    Attributes
    ----------
    name : str
        Case-file name.
    description : str
        Human-readable description.
    conductivity_percent : float
        Conductivity relative to annealed copper, %.
    alpha_r : float
        Thermal coefficient of resistivity at the reference temperature 20 °C, 1/°C.
    k0 : float
        1/αo, °C.
    fusing_temperature : float
        Tm, °C.
    rho_r : float
        Resistivity at 20 °C, µΩ·cm.
    tcap : float
        Thermal capacity per unit volume, J/(cm³·°C).
    density : float
        Mass density, kg/m³ (typical handbook values, common practice; for quantity estimates only).
    relative_permeability : float
        μr for the internal (skin-effect) impedance at power frequency. Copper, aluminium and austenitic
        stainless steel 1; carbon steels (and the steel core of copper-clad steel, taken as homogeneous) 300,
        a common-practice figure for earthing steel at power frequency (the true value depends on the steel and
        the current; a higher μr gives a higher impedance, the conservative side for the potential drop).
    """

    name: str
    description: str
    conductivity_percent: float
    alpha_r: float
    k0: float
    fusing_temperature: float
    rho_r: float
    tcap: float
    density: float = 8960.0
    relative_permeability: float = 1.0

    def resistivity(self, temperature: float | None = None) -> float:
        """Resistivity in Ω·m at ``temperature`` °C (20 °C when None): ρr (1 + αr (T − 20))."""
        t = 20.0 if temperature is None else temperature
        return self.rho_r * 1e-8 * (1.0 + self.alpha_r * (t - 20.0))


MATERIALS: dict[str, Material] = {
    m.name: m
    for m in (
        Material("copper-annealed", "copper, annealed soft-drawn", 100.0, 0.00393, 234.0, 1083.0, 1.72, 3.42, 8960.0),
        Material("copper-hard-drawn", "copper, commercial hard-drawn", 97.0, 0.00381, 242.0, 1084.0, 1.78, 3.42, 8960.0),
        Material("copper-clad-steel-40", "copper-clad steel wire, 40 %", 40.0, 0.00378, 245.0, 1084.0, 4.40, 3.85, 8150.0, 300.0),
        Material("copper-clad-steel-30", "copper-clad steel wire, 30 %", 30.0, 0.00378, 245.0, 1084.0, 5.86, 3.85, 8100.0, 300.0),
        Material("aluminium-ec", "aluminium, EC grade", 61.0, 0.00403, 228.0, 657.0, 2.86, 2.56, 2700.0),
        Material("steel-1020", "steel 1020", 10.8, 0.00160, 605.0, 1510.0, 15.90, 3.28, 7850.0, 300.0),
        Material("zinc-coated-steel", "zinc-coated steel rod", 8.6, 0.00320, 293.0, 419.0, 20.10, 3.93, 7850.0, 300.0),
        Material("stainless-304", "stainless steel 304", 2.4, 0.00130, 749.0, 1400.0, 72.00, 4.03, 8000.0),
    )
}
