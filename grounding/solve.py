"""Solve R i = V for the segment leakage currents by Cholesky factorisation, and check the residual.

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

from dataclasses import dataclass

import numpy as np
import scipy.linalg

from .errors import GroundingError


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
    """

    currents_per_volt: np.ndarray
    resistance: float
    relative_residual: float
    group_potential: np.ndarray = None
    group_current: np.ndarray = None

    def currents(self, grid_current: float) -> np.ndarray:
        """Segment leakage currents, A, when the grid injects ``grid_current`` (A) into the soil."""
        return self.currents_per_volt * grid_current * self.resistance


def solve_equipotential(R: np.ndarray, group: np.ndarray | None = None,
                        connections: tuple[str, ...] = ("energised",)) -> Solution:
    """Leakage currents of an equipotential electrode system at 1 V, with separate electrodes.

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
    n = R.shape[0]
    group = np.zeros(n, int) if group is None else np.asarray(group, int)
    if len(connections) == 1:
        return _solve_energised_only(R)
    v0 = (group == 0).astype(float)
    floating = [g for g, kind in enumerate(connections) if kind == "floating" and (group == g).any()]
    B = np.zeros((n, len(floating)))
    for k, g in enumerate(floating):
        B[group == g, k] = 1.0
    factor = _factor(R)
    X = scipy.linalg.cho_solve(factor, np.column_stack([v0, B]), check_finite=False)
    x0, XB = X[:, 0], X[:, 1:]
    u = np.zeros(0)
    if floating:
        S = B.T @ XB
        u = np.linalg.solve(0.5 * (S + S.T), -(B.T @ x0))
    i = x0 + XB @ u
    v = v0 + B @ u
    residual = float(np.linalg.norm(R @ i - v) / np.sqrt(n))
    net_floating = np.abs(B.T @ i).max() if floating else 0.0
    if not np.isfinite(residual) or residual > 1e-6 or not net_floating <= 1e-9 * np.abs(i).sum():
        raise GroundingError(f"the solve did not converge (relative residual {residual:.1e}, floating net current "
                             f"{net_floating:.1e} A/V); check the electrodes for coincident or overlapping conductors")
    potential = np.array([1.0 if kind == "energised" else 0.0 for kind in connections])
    potential[floating] = u
    current = np.bincount(group, i, minlength=len(connections))
    main = current[0]
    if not main > 0:
        raise GroundingError("the energised system sends no current into the soil; check the electrodes")
    return Solution(i, float(1.0 / main), residual, potential, current)


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


def _solve_energised_only(R: np.ndarray) -> Solution:
    """The plain equipotential system R i = 1."""
    n = R.shape[0]
    ones = np.ones(n)
    factor = _factor(R)
    i = scipy.linalg.cho_solve(factor, ones, check_finite=False)
    residual = float(np.linalg.norm(R @ i - ones) / np.sqrt(n))
    if not np.isfinite(residual) or residual > 1e-6:
        raise GroundingError(f"the solve did not converge (relative residual {residual:.1e}); "
                             "check the electrodes for coincident or overlapping conductors")
    return Solution(i, float(1.0 / i.sum()), residual, np.ones(1), np.array([i.sum()]))
