"""The electrodes as conductors with impedance: node potentials, branch currents and leakage currents,
solved together (phasors at the study frequency; real at DC).

Unknowns: the node potentials φ (n), the branch currents I (one per segment) and the leakage currents i
(one per segment). With A the segment–node averaging matrix, D the node–branch incidence, Z the branch
impedance matrix (:mod:`grounding.conductor_impedance`) and R the soil's mutual-resistance matrix:

    R i = A φ                 (each segment's potential drives the soil)
    Z I = Dᵀ φ                (each branch's voltage drop)
    D I + Aᵀ i = J            (Kirchhoff's current law: the injected current leaves by branches and soil)

Eliminating i and I gives the nodal system (Aᵀ R⁻¹ A + D Z⁻¹ Dᵀ) φ = J, the soil admittance plus the
metal's. Branches of zero impedance (ideal leads) join their nodes into one; separate electrodes tied to
remote earth have their nodes at 0 V; floating ones have no injection (their net leakage is then zero by
the current law). Parts of the energised system that do not touch its metal are taken as bonded to the
first injection point by ideal leads (the conservative side: they sit at its potential).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
import scipy.linalg
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

from ..errors import GroundingError
from ..geometry.network import MetalNetwork


@dataclass(frozen=True)
class NetworkSolution:
    """The coupled solution for 1 A injected (complex phasors; real parts only at DC).

    Attributes
    ----------
    node_potential : ndarray, shape (n,)
        Node potentials to remote earth, V per A injected.
    leakage : ndarray, shape (N,)
        Segment leakage currents, A per A injected.
    branch_current : ndarray, shape (N,)
        Longitudinal current of each segment from its start to its end node, A per A (NaN in ideal leads).
    impedance : complex
        Impedance to remote earth seen at the first injection point, Ω.
    injection_nodes : tuple of int
        Node of each injection point.
    relative_residual : float
        ‖R i − A φ‖ / ‖A φ‖.
    power_balance : float
        |P_in − P_metal − P_soil| / P_in (the energy check; zero up to rounding).
    """

    node_potential: np.ndarray
    leakage: np.ndarray
    branch_current: np.ndarray
    impedance: complex
    injection_nodes: tuple[int, ...]
    relative_residual: float
    power_balance: float


def _contraction(n: int, pairs: np.ndarray) -> tuple[np.ndarray, int]:
    """Label of each node after joining the node pairs (ideal leads), and the number of labels."""
    if len(pairs) == 0:
        return np.arange(n), n
    adj = sp.csr_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(n, n))
    count, label = connected_components(adj, directed=False)
    return label, count


def _nodal_setup(network: MetalNetwork, ideal: np.ndarray, injection, connections):
    """Node contraction (ideal leads; energised parts not touching the injected metal bonded to the first
    injection node), the free (not remote) nodes, A (N × m_free), D (m_free × N_real) as sparse matrices,
    the injection vector J and the real (non-ideal) branches."""
    n, N = network.size, len(network.ends)
    group = network.group
    links = [network.ends[ideal]]
    comp = network.components()
    first = injection[0][0]
    for c in np.unique(comp[group == 0]):
        if c != comp[first]:
            links.append(np.array([[first, int(np.flatnonzero((comp == c) & (group == 0))[0])]]))
    label, m = _contraction(n, np.vstack(links) if links else np.zeros((0, 2), int))
    P = sp.csr_matrix((np.ones(n), (np.arange(n), label)), shape=(n, m))
    remote = np.zeros(m, bool)
    for g, kind in enumerate(connections):
        if kind == "remote":
            remote[np.unique(label[group == g])] = True
    free = np.flatnonzero(~remote)
    Pf = P[:, free]
    A = (network.averaging() @ Pf).tocsr()                         # (N, m_free)
    real = np.setdiff1d(np.arange(N), ideal)
    D = (network.incidence()[:, real].T @ Pf).T.tocsr()          # (m_free, N_real)
    J = np.zeros(len(free), complex)
    where = {int(k): i for i, k in enumerate(free)}
    for node, share in injection:
        J[where[int(label[node])]] += share
    return label, m, free, A, D, J, real


def solve_network(R: np.ndarray, network: MetalNetwork, Z: np.ndarray, injection: list[tuple[int, float]],
                  connections: tuple[str, ...] = ("energised",)) -> NetworkSolution:
    """Solve the coupled metal–soil system for 1 A injected at the given nodes (see the module text).

    Parameters
    ----------
    R : ndarray, shape (N, N)
        Mutual-resistance matrix of the segments, Ω.
    network : MetalNetwork
        Nodes and branches.
    Z : ndarray, shape (N, N)
        Branch impedance matrix, Ω (complex); a branch whose row and column are zero is an ideal lead.
    injection : list of (node, share)
        Where the current enters; the shares sum to 1.
    connections : tuple of str
        Per potential group: ``energised`` (0), ``floating`` or ``remote``.
    """
    N = len(network.ends)
    ideal = np.flatnonzero((np.abs(Z).sum(axis=0) == 0) & (np.abs(Z).sum(axis=1) == 0))
    label, m, free, A, D, J, real = _nodal_setup(network, ideal, injection, connections)
    A, D = A.toarray(), D.toarray()
    try:
        factor = scipy.linalg.cho_factor(R, lower=True, check_finite=True)
    except (np.linalg.LinAlgError, ValueError) as exc:
        raise GroundingError(f"the mutual-resistance matrix is not positive definite ({exc}); check the electrodes "
                             "for coincident conductors") from None
    RA = scipy.linalg.cho_solve(factor, A, check_finite=False)
    Y = (A.T @ RA).astype(complex)
    Zr = Z[np.ix_(real, real)]
    if len(real):
        diagonal = np.diag(Zr)
        if np.count_nonzero(Zr - np.diag(diagonal)) == 0:           # DC: resistances only
            ZD = D.T / diagonal[:, None]
        else:                                                       # LU: faster here than the symmetric solver
            ZD = scipy.linalg.solve(Zr, D.T.astype(complex), check_finite=True)
        Y = Y + D @ ZD
    try:
        phi_free = scipy.linalg.solve(Y, J, check_finite=True)
    except (np.linalg.LinAlgError, ValueError) as exc:
        raise GroundingError(f"the metal–soil network could not be solved ({exc}); check the conductors' impedances "
                             "and that every floating part touches the soil") from None
    leakage = RA @ phi_free
    branch = np.full(N, np.nan + 0j)
    if len(real):
        branch[real] = ZD @ phi_free
    segment_v = A @ phi_free
    residual = float(np.linalg.norm(R @ leakage - segment_v) / max(np.linalg.norm(segment_v), 1e-300))
    p_metal = float(np.real(np.vdot(branch[real], Zr @ branch[real]))) if len(real) else 0.0
    solution = _network_solution(label, m, free, phi_free, leakage, branch, J, p_metal,
                                 float(np.real(np.vdot(leakage, R @ leakage))), injection, residual)
    if not (np.isfinite(residual) and residual < 1e-6 and solution.power_balance < 1e-6
            and np.all(np.isfinite(solution.node_potential))):
        raise GroundingError(f"the metal–soil network solve is not accurate (residual {residual:.1e}, power balance "
                             f"{solution.power_balance:.1e}); check for coincident conductors or extreme impedances")
    return solution


def _network_solution(label, m, free, phi_free, leakage, branch, J, p_metal: float, p_soil: float, injection,
                      residual: float) -> NetworkSolution:
    """Node potentials of every node (contracted and remote ones included) and the power balance
    |P_in − P_metal − P_soil| / P_in of a solved system."""
    phi_m = np.zeros(m, complex)
    phi_m[free] = phi_free
    phi = phi_m[label]
    p_in = float(np.real(np.vdot(J, phi_free)))
    balance = abs(p_in - p_metal - p_soil) / max(abs(p_in), 1e-300)
    return NetworkSolution(phi, leakage, branch, complex(phi[injection[0][0]]), tuple(int(k) for k, _ in injection),
                           residual, balance)


@dataclass(frozen=True)
class MetalState:
    """The metal's side of a coupled solution, per volt of the injection point's GPR magnitude.

    Attributes
    ----------
    network : MetalNetwork
        Nodes and branches.
    solution : NetworkSolution
        The solution for 1 A injected.
    """

    network: MetalNetwork
    solution: NetworkSolution

    @property
    def node_potential(self) -> np.ndarray:
        """Node potentials per volt of |GPR at the injection point| (complex)."""
        return self.solution.node_potential / abs(self.solution.impedance)

    def fraction(self, group: int = 0) -> tuple[float, float]:
        """Least and largest |node potential| of a group as a fraction of the injection point's."""
        v = np.abs(self.node_potential[self.network.group == group])
        return float(v.min()), float(v.max())

    @cached_property
    def _main_nodes(self):
        members = np.flatnonzero(self.network.group == 0)
        return cKDTree(self.network.nodes[members, :2]), self.node_potential[members]

    def main_metal(self, xy: np.ndarray) -> np.ndarray:
        """Potential (per volt, complex) of the energised system's node nearest in plan to each (M, 2) point."""
        tree, values = self._main_nodes
        _, k = tree.query(np.atleast_2d(np.asarray(xy, float)))
        return values[k]


#: GMRES of the coupled block system: relative residual and most iterations (restart length 60).
NETWORK_RTOL = 1e-7
NETWORK_MAX_ITERATIONS = 600


def solve_network_iterative(operator, network: MetalNetwork, internal: np.ndarray, inductance, frequency: float,
                            injection: list[tuple[int, float]], connections: tuple[str, ...] = ("energised",),
                            ) -> tuple[NetworkSolution, int]:
    """The coupled solve for large systems, without dense matrices: GMRES (scipy.sparse.linalg.gmres) on the
    block system

        [ R   0   −A ] [i]   [ 0 ]
        [ 0   Z   −Dᵀ] [I] = [ 0 ]
        [ −Aᵀ −D   0 ] [φ]   [ −J ]

    with R the compressed soil operator, Z = diag(internal) + jω M (M a :class:`CompressedInductance`),
    preconditioned by the block diagonal (block Jacobi of R, diag Z, and the sparse Schur approximation
    Aᵀ diag(R)⁻¹ A + D diag(Z)⁻¹ Dᵀ by sparse LU). Returns the solution and the iteration count."""
    import scipy.sparse.linalg as spla

    from .equipotential import block_jacobi

    N = len(network.ends)
    label, m, free, A, D, J, real = _nodal_setup(network, np.zeros(0, int), injection, connections)
    nf = len(free)
    omega = 2 * np.pi * frequency

    def R_apply(x):
        return operator.apply(x.real) + 1j * operator.apply(x.imag) if np.iscomplexobj(x) else operator.apply(x)

    def Z_apply(x):
        out = internal * x
        return out + 1j * omega * inductance.apply(x) if (inductance is not None and frequency > 0) else out

    def K(w):
        i, I, phi = w[:N], w[N:2 * N], w[2 * N:]
        return np.concatenate([R_apply(i) - A @ phi, Z_apply(I) - D.T @ phi, -(A.T @ i) - D @ I])

    jacobi = block_jacobi(operator)
    z_diag = internal + (1j * omega * inductance.diagonal() if (inductance is not None and frequency > 0) else 0.0)
    schur = (A.T @ sp.diags(1.0 / operator.diagonal) @ A + D @ sp.diags(1.0 / z_diag) @ D.T).tocsc()
    lu = spla.splu(schur.astype(complex))

    def precondition(w):
        i, I, phi = w[:N], w[N:2 * N], w[2 * N:]
        pi = jacobi(i.real) + 1j * jacobi(i.imag)
        return np.concatenate([pi, I / z_diag, -lu.solve(phi)])

    size = 2 * N + nf
    Kop = spla.LinearOperator((size, size), matvec=K, dtype=complex)
    Mop = spla.LinearOperator((size, size), matvec=precondition, dtype=complex)
    rhs = np.concatenate([np.zeros(2 * N, complex), -J])
    count = [0]

    def step(_):
        count[0] += 1

    w, info = spla.gmres(Kop, rhs, M=Mop, rtol=NETWORK_RTOL, atol=0.0, restart=60, maxiter=NETWORK_MAX_ITERATIONS // 60,
                         callback=step, callback_type="pr_norm")
    residual = float(np.linalg.norm(K(w) - rhs) / np.linalg.norm(rhs))
    if info != 0 or not np.isfinite(residual) or residual > 10 * NETWORK_RTOL:
        raise GroundingError(f"the iterative metal–soil solve did not converge ({count[0]} iterations, relative "
                             f"residual {residual:.1e}); use a longer discretization.max_segment so that the dense "
                             "solve applies (up to 3 000 segments)")
    leakage, branch, phi_free = w[:N], w[N:2 * N], w[2 * N:]
    solution = _network_solution(label, m, free, phi_free, leakage, branch, J,
                                 float(np.real(np.vdot(branch, Z_apply(branch)))),
                                 float(np.real(np.vdot(leakage, R_apply(leakage)))), injection, residual)
    if not solution.power_balance < 1e-4:
        raise GroundingError(f"the iterative metal–soil solve does not conserve power (balance "
                             f"{solution.power_balance:.1e}); use a longer discretization.max_segment so that the "
                             "dense solve applies")
    return solution, count[0]
