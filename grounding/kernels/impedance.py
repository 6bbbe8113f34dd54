"""Series impedance of the electrode metal: resistance, internal (skin-effect) impedance and the partial
inductances of the segments.

Per segment k of length l_k the branch impedance matrix is

    Z = diag(z_int,k · l_k) + jω M,

z_int the internal impedance per metre of a round conductor (the Bessel-function formula of a solid
round wire, Schelkunoff 1934):

    z_int = (k ρ / (2π a)) · I0(k a) / I1(k a),   k = √(jωμ/ρ),

which tends to the DC resistance ρ/(π a²) at low frequency and to (1 + j) ρ / (2π a δ), δ = √(2ρ/(ωμ)),
at high frequency. a is the radius of the solid wire of the element's nominal cross-section (a stranded
conductor or a tape is taken as the round wire of its area). M is the matrix of partial inductances of
the straight segments by Neumann's formula,

    M_ij = μ0 / (4π) · (u_i · u_j) ∫∫ ds dt / |x_i(s) − x_j(t)|,

in free space (the soil is not magnetic); the self terms use the thin-wire reduced kernel, which gives
Grover's external inductance of a straight round wire, μ0 l / (2π) (ln(2l/a) − 1). The soil's own eddy
currents (the earth-return correction of Carson and Sunde) are neglected: valid while the electrode's
extent is small against the soil's skin depth 503 √(ρ_soil / f) m; beyond it the inductive drop is
overstated (the conservative side), and the study says so."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse
import scipy.special
from scipy.spatial import cKDTree

from ..case.model import Case
from ..geometry.segments import Segments
from ..materials import MATERIALS
from .integrals import segment_pair_integral

#: Permeability of free space, H/m.
MU0 = 4e-7 * np.pi
#: Pairs nearer than this many segment lengths get the exact Neumann double integral; the rest the
#: midpoint rule (relative error about (l/d)²/24, under 0.3 %).
EXACT_REACH = 4.0


def internal_impedance(radius, resistivity, relative_permeability, frequency: float) -> np.ndarray:
    """Internal impedance per metre of a solid round conductor, Ω/m (complex).

    Parameters
    ----------
    radius : array_like
        m.
    resistivity : array_like
        Ω·m.
    relative_permeability : array_like
        μr of the metal.
    frequency : float
        Hz; 0 gives the DC resistance ρ / (π a²).
    """
    a, rho, mu_r = np.broadcast_arrays(*(np.asarray(x, float) for x in (radius, resistivity, relative_permeability)))
    dc = rho / (np.pi * a * a)
    if frequency == 0:
        return dc.astype(complex)
    k = np.sqrt(1j * 2 * np.pi * frequency * MU0 * mu_r / rho)
    x = k * a
    small = np.abs(x) < 1e-3
    # I0/I1 with the exponentially scaled Bessel functions (the scalings cancel), safe for large |ka|
    ratio = scipy.special.ive(0, np.where(small, 1.0, x)) / scipy.special.ive(1, np.where(small, 1.0, x))
    z = k * rho / (2 * np.pi * a) * ratio
    # series for tiny ka: I0/I1 = 2/x + x/4 + ..., i.e. ρ/(πa²) + jωμ/(8π)
    low = dc + 1j * 2 * np.pi * frequency * MU0 * mu_r / (8 * np.pi)
    return np.where(small, low, z)


def skin_depth(resistivity, relative_permeability, frequency: float) -> np.ndarray:
    """δ = √(2ρ / (ωμ)), m (infinite at DC)."""
    if frequency == 0:
        return np.full(np.shape(resistivity), np.inf)
    return np.sqrt(2 * np.asarray(resistivity) / (2 * np.pi * frequency * MU0 * np.asarray(relative_permeability)))


def exact_pairs(segments: Segments):
    """The pairs i < j nearer than EXACT_REACH segment lengths that couple (u_i · u_j ≠ 0), as (i, j, u_i · u_j,
    ∫∫ ds dt / r in m), and the self integrals ∫∫ ds dt / r of every segment (thin-wire kernel), m."""
    a, b = segments.start, segments.end
    L = segments.length
    u = (b - a) / L[:, None]
    pairs = cKDTree(segments.midpoint).query_pairs(EXACT_REACH * L.max(), output_type="ndarray").reshape(-1, 2)
    dot = np.einsum("ij,ij->i", u[pairs[:, 0]], u[pairs[:, 1]])
    keep = np.abs(dot) > 1e-12
    i, j, dot = pairs[keep, 0], pairs[keep, 1], dot[keep]
    exact = segment_pair_integral(a[i], b[i], a[j], b[j], 0.5 * (segments.radius[i] + segments.radius[j]))
    return i, j, dot, exact, segment_pair_integral(a, b, a, b, segments.radius)


def partial_inductances(segments: Segments) -> np.ndarray:
    """Neumann partial-inductance matrix of the segments, H, shape (N, N) (see the module text)."""
    L = segments.length
    u = (segments.end - segments.start) / L[:, None]
    dot = u @ u.T
    mid = segments.midpoint
    d = np.sqrt(np.maximum(np.sum(mid ** 2, 1)[:, None] + np.sum(mid ** 2, 1)[None, :] - 2 * mid @ mid.T, 0.0))
    with np.errstate(divide="ignore"):
        M = MU0 / (4 * np.pi) * dot * np.outer(L, L) / d
    M[np.abs(dot) <= 1e-12] = 0.0
    i, j, dot_ij, exact, own = exact_pairs(segments)
    M[i, j] = M[j, i] = MU0 / (4 * np.pi) * dot_ij * exact
    M[np.diag_indices(len(L))] = MU0 / (4 * np.pi) * own
    return M


@dataclass(frozen=True)
class SeriesImpedance:
    """Series impedance of every segment.

    Attributes
    ----------
    resistance : ndarray, shape (N,)
        DC resistance of each segment at the conductor temperature, Ω.
    internal : ndarray, shape (N,)
        Internal impedance of each segment at the study frequency, Ω (complex).
    inductance : ndarray, shape (N, N) or None
        Partial inductances, H (None at DC, where they do not enter).
    frequency : float
        Hz.
    temperature : float
        Conductor temperature the resistance is for, °C.
    """

    resistance: np.ndarray
    internal: np.ndarray
    inductance: np.ndarray | None
    frequency: float
    temperature: float

    def matrix(self) -> np.ndarray:
        """Branch impedance matrix Z, Ω (complex; diagonal at DC)."""
        Z = np.diag(self.internal.astype(complex))
        if self.inductance is not None and self.frequency > 0:
            Z = Z + 1j * 2 * np.pi * self.frequency * self.inductance
        return Z


def element_properties(case: Case, segments: Segments) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per segment: resistivity at the conductor temperature (Ω·m), cross-section (m²) and μr, from each
    element's material and nominal area (merged conductors take their first element's)."""
    el = case.electrodes
    elements = {}
    for system in [el] + list(case.separate_electrodes):
        for x in system.grids + system.conductors + system.rods:
            elements[x.key] = x
    t = el.conductor_temperature
    per_conductor = []
    for key, r in zip(segments.conductors.keys, segments.conductors.radius):
        x = elements.get(key.split(" + ")[0])
        material = MATERIALS[(x.material if x is not None else "") or el.material]
        area = x.area if x is not None else np.pi * r * r
        per_conductor.append((material.resistivity(t), area, material.relative_permeability))
    arr = np.array(per_conductor, float).reshape(-1, 3)[segments.conductor]
    return arr[:, 0], arr[:, 1], arr[:, 2]


def series_impedance(case: Case, segments: Segments, inductance: bool = True) -> SeriesImpedance:
    """The series impedance of the case's segments at ``case.fault.frequency``."""
    f = case.fault.frequency
    rho, area, mu_r = element_properties(case, segments)
    L = segments.length
    radius = np.sqrt(area / np.pi)
    internal = internal_impedance(radius, rho, mu_r, f) * L
    M = partial_inductances(segments) if (inductance and f > 0) else None
    t = 20.0 if case.electrodes.conductor_temperature is None else case.electrodes.conductor_temperature
    return SeriesImpedance(rho * L / area, internal, M, f, t)
