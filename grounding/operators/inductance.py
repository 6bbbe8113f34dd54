"""The Neumann partial-inductance operator of many segments, compressed (hierarchical far field plus exact near pairs)."""

from __future__ import annotations

import numpy as np
import scipy.sparse
import scipy.special

from ..geometry.segments import Segments
from ..kernels.impedance import MU0, exact_pairs


class CompressedInductance:
    """Neumann partial inductances of many segments as an operator: M x = μ0/(4π) Σ_k W_k G (W_k x) + C x,
    G the hierarchical matrix of 1/r between segment midpoints (:func:`grounding.hmatrix.build_hmatrix`),
    W_k = diag(l u_k) the segments' length-weighted direction cosines, and C the sparse correction of the
    pairs nearer than EXACT_REACH segment lengths (exact double integral minus the midpoint value) and of the
    self terms. The same rule as :func:`partial_inductances`, with the far field interpolated."""

    def __init__(self, segments: Segments):
        from .hmatrix import build_hmatrix

        L = segments.length
        mid = segments.midpoint
        self.weights = (segments.end - segments.start)                  # (N, 3): l · u_k
        self.G = build_hmatrix(lambda r, z, zp: 1.0 / np.sqrt(r * r + (z - zp) ** 2), mid)
        i, j, dot, exact, own = exact_pairs(segments)
        midpoint = L[i] * L[j] / np.linalg.norm(mid[i] - mid[j], axis=1)
        n = len(L)
        rows = np.concatenate([i, j, np.arange(n)])
        cols = np.concatenate([j, i, np.arange(n)])
        vals = MU0 / (4 * np.pi) * np.concatenate([dot * (exact - midpoint), dot * (exact - midpoint), own])
        self.correction = scipy.sparse.csr_matrix((vals, (rows, cols)), shape=(n, n))
        self.size = n

    def diagonal(self) -> np.ndarray:
        """M_ii, H."""
        return self.correction.diagonal()

    def apply(self, x: np.ndarray) -> np.ndarray:
        """M x (H·A = V·s) for a real or complex vector x of branch currents (A)."""
        def real(v):
            X = self.weights * v[:, None]                                # (N, 3)
            return MU0 / (4 * np.pi) * np.einsum("ik,ik->i", self.weights, self.G.matvec(X)) + self.correction @ v
        if np.iscomplexobj(x):
            return real(x.real) + 1j * real(x.imag)
        return real(x)
