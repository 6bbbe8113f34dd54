"""Solve R i = V for the segment leakage currents (Cholesky factorisation of the dense matrix, or
preconditioned conjugate gradients on a compressed operator) and check the residual.

The energised system is at 1 V. Separate electrodes tied to remote earth are at 0 V. Each floating
electrode k adds an unknown potential u_k and the condition that its net leakage current is zero,
which makes the bordered system

    [ R    −B ] [ i ]   [ v0 ]
    [ −Bᵀ   0 ] [ u ] = [ 0  ]

with B (N × K) the membership of segments in floating electrodes. It is solved through its Schur
complement with the one Cholesky factor of R: X = R⁻¹ [v0, B], S = Bᵀ R⁻¹ B (K × K, symmetric
positive definite), S u = −Bᵀ R⁻¹ v0, i = R⁻¹ (v0 + B u).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import scipy.linalg
from threadpoolctl import threadpool_limits

from ..errors import GroundingError
from ..operators.hmatrix import threaded_map


@dataclass(frozen=True)
class Solution:
    """Leakage currents for the electrode system raised to 1 V above remote earth.

    Attributes
    ----------
    currents_per_volt : ndarray, shape (N,)
        Leakage current of each segment per volt of GPR, A/V.
    resistance : float
        Grid resistance to remote earth Rg = 1 / Σ i, Ω.
    relative_residual : float
        ‖R i − v‖ / √N of the solved system (v the segment potentials).
    group_potential : ndarray, shape (G,)
        Potential of each potential group per volt of GPR (group 0 the energised system, 1; remote 0).
    group_current : ndarray, shape (G,)
        Net leakage current of each group into the soil per volt of GPR, A/V (floating: 0).
    solver : dict
        How it was solved: ``kind`` (dense or iterative), ``relative_residual`` and, iterative,
        ``iterations``.
    metal : MetalState or None
        Conductors with impedance (:mod:`grounding.solve_network`): the metal's potentials; the currents and
        group values are then phasors per volt of the injection point's GPR magnitude and ``resistance`` is
        the magnitude of the grid impedance.
    """

    currents_per_volt: np.ndarray
    resistance: float
    relative_residual: float
    group_potential: np.ndarray = None
    group_current: np.ndarray = None
    solver: dict = None
    metal: object = None

    def currents(self, grid_current: float) -> np.ndarray:
        """Segment leakage currents, A, when the grid injects ``grid_current`` (A) into the soil."""
        return self.currents_per_volt * grid_current * self.resistance


def solve_equipotential(R: np.ndarray, group: np.ndarray | None = None,
                        connections: tuple[str, ...] = ("energised",)) -> Solution:
    """Leakage currents of an equipotential electrode system at 1 V, with separate electrodes, by the
    Cholesky factorisation of the dense matrix.

    Parameters
    ----------
    R : ndarray, shape (N, N)
        Symmetric positive-definite mutual-resistance matrix, Ω.
    group : ndarray of int, shape (N,), optional
        Potential group of each segment; 0 (the default for all) is the energised system.
    connections : tuple of str
        Per group: ``energised`` (group 0), ``floating`` or ``remote``.

    Raises
    ------
    GroundingError
        When the matrix is not positive definite (typically coincident conductors) or the residual
        check fails.
    """
    factor = _factor(R)
    return _bordered_solve(lambda x: R @ x, lambda rhs: scipy.linalg.cho_solve(factor, rhs, check_finite=False),
                           R.shape[0], group, connections, DENSE_RESIDUAL, {"kind": "dense"})


def solve_operator(operator, group: np.ndarray | None = None, connections: tuple[str, ...] = ("energised",),
                   progress=None) -> Solution:
    """Solve with a dense operator (Cholesky) or a compressed one (preconditioned conjugate gradients)."""
    if operator.kind == "dense":
        return solve_equipotential(operator.matrix, group, connections)
    return solve_iterative(operator, group, connections, progress=progress)


#: Relative residual at which the dense solve is accepted (‖R i − v‖ / ‖v‖).
DENSE_RESIDUAL = 1e-6
#: Relative residual at which the conjugate gradients stop: 1e-3 of the smallest discretisation error
#: the study treats as meaningful (0.1 %), so that the iteration adds nothing visible to it.
ITERATIVE_RTOL = 1e-6
#: Iterations after which the conjugate gradients give up (seen: 12 at 1 000 segments, 22 at 100 000).
MAX_ITERATIONS = 400


def block_jacobi(operator):
    """Preconditioner: the inverse of R's diagonal blocks over compact groups of segments (Cholesky)."""
    def factor(idx):
        try:
            return idx, scipy.linalg.cho_factor(operator.block(idx), lower=True, check_finite=True)
        except (np.linalg.LinAlgError, ValueError) as exc:
            raise GroundingError(
                f"the mutual-resistance matrix is not positive definite near segment {int(idx[0])} ({exc}); this "
                "happens when two conductors coincide or nearly coincide; check the electrodes for duplicates") from None

    with threadpool_limits(limits=1, user_api="blas"):          # the blocks run on threads of their own
        factors = list(threaded_map(factor, operator.blocks()))

    def apply(r: np.ndarray) -> np.ndarray:
        out = np.empty_like(r)
        for idx, f in factors:
            out[idx] = scipy.linalg.cho_solve(f, r[idx], check_finite=False)
        return out

    return apply


def solve_iterative(operator, group: np.ndarray | None = None, connections: tuple[str, ...] = ("energised",),
                    rtol: float = ITERATIVE_RTOL, max_iterations: int | None = None, progress=None) -> Solution:
    """Leakage currents at 1 V by preconditioned conjugate gradients (scipy.sparse.linalg.cg) on any
    operator with ``apply``, ``blocks`` and ``block`` (see :mod:`grounding.operators`); one run per
    right-hand side (the energised system and each floating electrode).

    Raises
    ------
    GroundingError
        When the iteration does not reach ``rtol`` within ``max_iterations`` (default MAX_ITERATIONS).
    """
    import scipy.sparse.linalg as spla

    n = operator.size
    max_iterations = max_iterations or MAX_ITERATIONS
    precondition = block_jacobi(operator)
    A = spla.LinearOperator((n, n), matvec=operator.apply, dtype=float)
    M = spla.LinearOperator((n, n), matvec=precondition, dtype=float)
    counts = []

    def solve_columns(rhs: np.ndarray) -> np.ndarray:
        rhs = rhs.reshape(n, -1)
        out = np.empty_like(rhs)
        for c in range(rhs.shape[1]):
            k = [0]

            def step(_x):
                k[0] += 1
                if progress:
                    progress("solve", min(1.0, (c + k[0] / 40) / rhs.shape[1]))

            x, info = spla.cg(A, rhs[:, c], rtol=rtol, atol=0.0, maxiter=max_iterations, M=M, callback=step)
            if info != 0 or not np.all(np.isfinite(x)):
                res = np.linalg.norm(operator.apply(x) - rhs[:, c]) / max(np.linalg.norm(rhs[:, c]), 1e-300)
                raise GroundingError(
                    f"the iterative solve did not converge in {k[0]} iterations (relative residual {res:.1e}, "
                    f"wanted {rtol:.0e}); try discretization.solver: dense if the model fits in memory, or check "
                    "the electrodes for nearly coincident conductors")
            counts.append(k[0])
            out[:, c] = x
        return out

    solution = _bordered_solve(operator.apply, solve_columns, n, group, connections, 10 * rtol,
                               {"kind": "iterative"})
    return replace(solution, solver={**solution.solver, "iterations": int(max(counts)),
                                     "iterations_per_run": [int(c) for c in counts]})


def _bordered_solve(apply, solve_columns, n: int, group, connections, tolerance: float, solver: dict) -> Solution:
    """The bordered system of the module text, given R·x and a solver of R X = B for columns B."""
    group = np.zeros(n, int) if group is None else np.asarray(group, int)
    v0 = (group == 0).astype(float)
    floating = [g for g, kind in enumerate(connections) if kind == "floating" and (group == g).any()]
    B = np.zeros((n, len(floating)))
    for k, g in enumerate(floating):
        B[group == g, k] = 1.0
    X = solve_columns(np.column_stack([v0, B]))
    x0, XB = X[:, 0], X[:, 1:]
    u = np.zeros(0)
    if floating:
        S = B.T @ XB
        u = np.linalg.solve(0.5 * (S + S.T), -(B.T @ x0))
    i = x0 + XB @ u
    v = v0 + B @ u
    residual = float(np.linalg.norm(apply(i) - v) / max(np.linalg.norm(v), np.sqrt(n) * 1e-300))
    net_floating = np.abs(B.T @ i).max() if floating else 0.0
    if not np.isfinite(residual) or residual > tolerance or not net_floating <= 1e-9 * np.abs(i).sum():
        raise GroundingError(f"the solve did not converge (relative residual {residual:.1e}, floating net current "
                             f"{net_floating:.1e} A/V); check the electrodes for coincident or overlapping conductors")
    potential = np.array([1.0 if kind == "energised" else 0.0 for kind in connections])
    potential[floating] = u
    current = np.bincount(group, i, minlength=len(connections))
    main = current[0]
    if not main > 0:
        raise GroundingError("the energised system sends no current into the soil; check the electrodes")
    return Solution(i, float(1.0 / main), residual, potential, current, {**solver, "relative_residual": residual})


#: From this size on the dense factorisation runs on one BLAS thread where OpenBLAS uses its AVX-512
#: kernels. OpenBLAS 0.3.30/0.3.31 with the SkylakeX kernels crashed the process (segmentation fault)
#: factorising SPD matrices of 16 000 and more on 2 threads (15 000 completed; measured on the project's
#: 2-core machine); on one thread 16 400 completes in 17.8 s. With the Haswell kernels 16 400 completes on
#: 2 threads (16.2 s; one thread would take 28.7 s), so those keep their threads.
SINGLE_THREAD_FROM = 12_000
#: OpenBLAS core types whose multithreaded factorisation of large matrices is not trusted.
FAULTY_KERNELS = ("skylakex", "cooperlake", "sapphirerapids")


def blas_threads_for(n: int):
    """A context that limits BLAS to one thread for factorisations of size ``n`` ≥ SINGLE_THREAD_FROM on
    OpenBLAS AVX-512 kernels (see FAULTY_KERNELS); otherwise it changes nothing."""
    from contextlib import nullcontext

    if n < SINGLE_THREAD_FROM:
        return nullcontext()
    from threadpoolctl import threadpool_info, threadpool_limits

    arch = [str(d.get("architecture", "")).lower() for d in threadpool_info() if d.get("internal_api") == "openblas"]
    if not any(a in FAULTY_KERNELS for a in arch):
        return nullcontext()
    return threadpool_limits(limits=1, user_api="blas")


def _factor(R: np.ndarray):
    n = R.shape[0]
    try:
        with blas_threads_for(n):
            return scipy.linalg.cho_factor(R, lower=True, overwrite_a=False, check_finite=True)
    except MemoryError:
        raise GroundingError(f"not enough memory to factorise the {n}×{n} matrix ({2 * 8 * n * n / 2 ** 30:.1f} GiB "
                             "for it and its factor); use a longer discretization.max_segment") from None
    except (np.linalg.LinAlgError, ValueError) as exc:
        raise GroundingError(
            f"the {n}×{n} mutual-resistance matrix is not positive definite ({exc}); this happens when "
            "two conductors coincide or nearly coincide; check the electrodes for duplicates") from None
