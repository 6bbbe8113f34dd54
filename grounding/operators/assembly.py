"""Assembly of the Galerkin mutual-resistance matrix R (Ω) between electrode segments.

R_ij = 1/(L_i L_j) ∫_i ∫_j G(x, x') ds ds', G the soil kernel. Pairs are treated in three tiers by
the distance d between midpoints relative to the longer segment L of the pair:

- near (d < ``near_reach``·L, and every self term): the kernel's near terms are integrated exactly
  over the segment and the mirrored image segment (closed form for parallel pairs, end-clustered
  Gauss–Legendre times the closed-form line integral otherwise); the smooth remainder of the
  kernel by a 2 × 2 Gauss rule;
- middle (d < ``mid_reach``·L): 2 × 2 Gauss–Legendre points of the full kernel;
- far: the full kernel between midpoints (relative error below L²/(6 d²)).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy.spatial import cKDTree
from scipy.spatial.distance import cdist

from ..geometry.segments import Segments
from ..kernels.base import DEPTH_QUANTUM, SoilKernel
from ..kernels.integrals import GAUSS2, segment_pair_integral

Progress = Callable[[str, float], None]

#: Above this many distinct segment depths the far field is evaluated point-pair-wise.
MAX_DEPTH_CLASSES = 64
#: Rows per chunk of the far-field evaluation.
ROW_CHUNK = 128
#: Pairs per chunk of the near-field evaluation.
PAIR_CHUNK = 40_000
#: Bytes of one matrix entry (float64).
ENTRY_BYTES = 8


@dataclass(frozen=True)
class AssemblyOptions:
    """Where the tiers of the pair treatment change, in segment lengths."""

    near_reach: float = 4.0
    mid_reach: float = 12.0


def matrix_memory_bytes(n_segments: int) -> int:
    """Memory the dense solve needs: the matrix and its Cholesky factor, bytes."""
    return 2 * ENTRY_BYTES * n_segments * n_segments


def gauss_points(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """2-point Gauss–Legendre points on each segment, shape (n, 2, 3)."""
    g = GAUSS2[0]
    return a[:, None, :] + g[None, :, None] * (b - a)[:, None, :]


def _gauss2x2(evaluate, a_i, b_i, a_j, b_j) -> np.ndarray:
    """Mean of evaluate(r, z, z') over 2 × 2 Gauss points of segment pairs."""
    p = gauss_points(a_i, b_i)[:, :, None, :]
    q = gauss_points(a_j, b_j)[:, None, :, :]
    r = np.sqrt(np.sum((p[..., :2] - q[..., :2]) ** 2, axis=-1))
    z = np.broadcast_to(p[..., 2], r.shape)
    zp = np.broadcast_to(q[..., 2], r.shape)
    return evaluate(r, z, zp).mean(axis=(1, 2))


def near_pairs(segments: Segments, options: AssemblyOptions) -> tuple[np.ndarray, np.ndarray]:
    """Pairs i ≤ j of the near and the middle tier, each an (n, 2) index array (self pairs included)."""
    mid = segments.midpoint
    L = segments.length
    tree = cKDTree(mid)
    pairs = tree.query_pairs(options.mid_reach * L.max(), output_type="ndarray")
    if len(pairs) == 0:
        pairs = np.zeros((0, 2), dtype=np.intp)
    i, j = pairs[:, 0], pairs[:, 1]
    d = np.zeros(len(pairs))
    for k in range(3):                     # a coordinate at a time: no (n, 3) gathers (np.linalg.norm's took 6.5 of
        x = np.ascontiguousarray(mid[:, k])   # 7 s at 241 000 segments, 35 million pairs)
        dx = x[i]
        dx -= x[j]
        dx *= dx
        d += dx
    d = np.sqrt(d)
    lm = np.maximum(L[i], L[j])
    near = d < options.near_reach * lm
    middle = ~near & (d < options.mid_reach * lm)
    own = np.repeat(np.arange(len(L))[:, None], 2, axis=1)
    return np.vstack([own, pairs[near]]), pairs[middle]


def near_term_sum(kernel: SoilKernel, obs_z: np.ndarray, src_a: np.ndarray, src_b: np.ndarray,
                  integral) -> np.ndarray:
    """Σ_k c_k · integral(mask, c, d) over the kernel's near terms, for many observation–source pairs.

    The pairs are grouped by (observation layer, source layer); for each near term, c and d are the
    end points of the source segment's image (depth mapped to s·z' + t) for the pairs in ``mask``.
    Shared by the matrix (segment observers) and the surface stage (point observers).
    """
    lo = kernel.layer_of(obs_z)
    ls = kernel.layer_of(0.5 * (src_a[:, 2] + src_b[:, 2]))
    out = np.zeros(len(obs_z))
    for o in np.flatnonzero(np.bincount(lo)):               # the layers present, ascending (np.unique sorts)
        for sl in np.flatnonzero(np.bincount(ls)):
            m = (lo == o) & (ls == sl)
            if not m.any():
                continue
            c, d = src_a[m].copy(), src_b[m].copy()
            acc = np.zeros(int(m.sum()))
            terms = kernel.near_terms(int(o), int(sl))
            for coef, s, t in zip(terms.coefficient, terms.sign, terms.shift):
                c[:, 2] = s * src_a[m, 2] + t
                d[:, 2] = s * src_b[m, 2] + t
                acc += coef * integral(m, c, d)
            out[m] = acc
    return out


def near_values(segments: Segments, kernel: SoilKernel, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    """Galerkin R_ij (Ω) for near pairs: exact near terms plus 2 × 2 Gauss remainder."""
    a, b = segments.start, segments.end
    L = segments.length
    radius = 0.5 * (segments.radius[i] + segments.radius[j])
    ai, bi = a[i], b[i]
    exact = near_term_sum(kernel, segments.midpoint[i, 2], a[j], b[j],
                          lambda m, c, d: segment_pair_integral(ai[m], bi[m], c, d, radius[m]))
    return exact / (L[i] * L[j]) + _gauss2x2(kernel.remainder, ai, bi, a[j], b[j])


def middle_values(segments: Segments, kernel: SoilKernel, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    """Galerkin R_ij (Ω) for middle pairs: 2 × 2 Gauss–Legendre points of the full kernel."""
    a, b = segments.start, segments.end
    return _gauss2x2(kernel.potential, a[i], b[i], a[j], b[j])


def far_matrix(segments: Segments, kernel: SoilKernel, progress: Progress | None = None) -> np.ndarray:
    """The full kernel between all segment midpoints, Ω, shape (N, N) (diagonal meaningless)."""
    mid = segments.midpoint
    n = len(mid)
    out = np.empty((n, n))
    depth = np.round(mid[:, 2] / DEPTH_QUANTUM).astype(np.int64)
    classes, cls = np.unique(depth, return_inverse=True)
    xy = mid[:, :2]
    with np.errstate(divide="ignore", invalid="ignore"):
        if len(classes) <= MAX_DEPTH_CLASSES:
            members = [np.flatnonzero(cls == k) for k in range(len(classes))]
            zc = classes * DEPTH_QUANTUM
            done = 0
            for k, rows_all in enumerate(members):
                for start in range(0, len(rows_all), ROW_CHUNK):
                    rows = rows_all[start:start + ROW_CHUNK]
                    # blocks k ≤ q only, mirrored, so that R is exactly symmetric
                    for q in range(k, len(members)):
                        cols = members[q]
                        block = kernel.radial(zc[k], zc[q])(cdist(xy[rows], xy[cols]))
                        if len(members) == 1:
                            out[rows] = block
                        else:
                            out[np.ix_(rows, cols)] = block
                            if q != k:
                                out[np.ix_(cols, rows)] = block.T
                    done += len(rows)
                    if progress:
                        progress("assemble", done / n)
        else:
            # many depths: point pairs in large row blocks, so that the grouping by depth runs rarely
            z = mid[:, 2]
            block = max(ROW_CHUNK, 2_000_000 // max(n, 1))
            chunks = max(1, -(-n // block))
            for c in range(chunks):
                rows = slice(c * block, min(n, (c + 1) * block))
                r = cdist(xy[rows], xy)
                out[rows] = kernel.potential(r, z[rows, None], z[None, :])
                if progress:
                    progress("assemble", (c + 1) / chunks)
            # tables for (z, z') and (z', z) interpolate differently: make R exactly symmetric
            sym = out + out.T
            sym *= 0.5
            return sym
    return out


def assemble(segments: Segments, kernel: SoilKernel, options: AssemblyOptions = AssemblyOptions(),
             progress: Progress | None = None) -> np.ndarray:
    """The symmetric positive-definite mutual-resistance matrix R, Ω, shape (N, N).

    Parameters
    ----------
    segments : Segments
        The discretised electrodes.
    kernel : SoilKernel
        Soil Green's function.
    options : AssemblyOptions
        Tier limits.
    progress : callable, optional
        Called as progress(stage, fraction).
    """
    R = far_matrix(segments, kernel, progress)
    near, middle = near_pairs(segments, options)
    for start in range(0, len(middle), PAIR_CHUNK):
        p = middle[start:start + PAIR_CHUNK]
        v = middle_values(segments, kernel, p[:, 0], p[:, 1])
        R[p[:, 0], p[:, 1]] = v
        R[p[:, 1], p[:, 0]] = v
    for start in range(0, len(near), PAIR_CHUNK):
        p = near[start:start + PAIR_CHUNK]
        v = near_values(segments, kernel, p[:, 0], p[:, 1])
        R[p[:, 0], p[:, 1]] = v
        R[p[:, 1], p[:, 0]] = v
    return R
