"""Solve R i = V for the segment leakage currents by Cholesky factorisation, and check the residual."""

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
        ‖R i − 1‖ / ‖1‖ of the solved system.
    """

    currents_per_volt: np.ndarray
    resistance: float
    relative_residual: float

    def currents(self, grid_current: float) -> np.ndarray:
        """Segment leakage currents, A, when the grid injects ``grid_current`` (A) into the soil."""
        return self.currents_per_volt * grid_current * self.resistance


def solve_equipotential(R: np.ndarray) -> Solution:
    """Leakage currents of an equipotential electrode system at 1 V.

    Parameters
    ----------
    R : ndarray, shape (N, N)
        Symmetric positive-definite mutual-resistance matrix, Ω.

    Raises
    ------
    GroundingError
        When the matrix is not positive definite (typically coincident conductors) or the residual
        check fails.
    """
    n = R.shape[0]
    ones = np.ones(n)
    try:
        factor = scipy.linalg.cho_factor(R, lower=True, overwrite_a=False, check_finite=True)
    except (np.linalg.LinAlgError, ValueError) as exc:
        raise GroundingError(
            f"the {n}×{n} mutual-resistance matrix is not positive definite ({exc}); this happens when "
            "two conductors coincide or nearly coincide; check the electrodes for duplicates") from None
    i = scipy.linalg.cho_solve(factor, ones, check_finite=False)
    residual = float(np.linalg.norm(R @ i - ones) / np.sqrt(n))
    if not np.isfinite(residual) or residual > 1e-6:
        raise GroundingError(f"the solve did not converge (relative residual {residual:.1e}); "
                             "check the electrodes for coincident or overlapping conductors")
    return Solution(i, float(1.0 / i.sum()), residual)
