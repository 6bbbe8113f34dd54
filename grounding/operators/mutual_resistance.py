"""The mutual-resistance operator R (Ω) between segments, dense or compressed, behind one interface.

Both kinds give ``apply(x)`` (R·x), the ``diagonal``, ``dense()`` (where it fits), exact principal
sub-blocks ``block(idx)`` over compact groups ``blocks()`` (for the preconditioner of the iterative
solve) and their memory ``nbytes``; the compressed kind's near-field sparse part is ``local``. The dense kind holds the assembled matrix
(see :mod:`grounding.assembly`). The compressed kind holds

    R = H + C,

H the hierarchical approximation (:mod:`grounding.hmatrix`) of the midpoint kernel G(mᵢ, mⱼ) (the far
tier of the dense assembly, exact to L²/(6d²) at distance d), and C a sparse correction for the self,
near and middle pairs: their Galerkin value (exact near terms, Gauss quadrature) minus the midpoint
value. Its storage grows about linearly with the number of segments.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, field, replace

import numpy as np
import scipy.sparse as sp

from ..geometry.segments import Segments
from ..kernels.base import SoilKernel
from .assembly import PAIR_CHUNK, AssemblyOptions, Progress, assemble, middle_values, near_pairs, near_values
from .hmatrix import HMatrix, build_hmatrix, pair_values, row_parts, rows_product, threaded_map

#: Largest diagonal block of the block-Jacobi preconditioner (segments).
PRECONDITIONER_BLOCK = 256


@dataclass(frozen=True)
class DenseOperator:
    """The assembled matrix R, Ω, shape (N, N)."""

    matrix: np.ndarray
    kind: str = field(default="dense", init=False)

    @property
    def size(self) -> int:
        return self.matrix.shape[0]

    def apply(self, x: np.ndarray) -> np.ndarray:
        """R x, V per A of x."""
        return self.matrix @ x

    @property
    def diagonal(self) -> np.ndarray:
        return np.diag(self.matrix).copy()

    def block(self, idx: np.ndarray) -> np.ndarray:
        """R restricted to the segments ``idx`` (dense)."""
        return self.matrix[np.ix_(idx, idx)]

    def dense(self) -> np.ndarray:
        """The matrix itself."""
        return self.matrix

    def blocks(self) -> list[np.ndarray]:
        """Consecutive index ranges of at most PRECONDITIONER_BLOCK segments."""
        n = self.size
        return [np.arange(a, min(n, a + PRECONDITIONER_BLOCK)) for a in range(0, n, PRECONDITIONER_BLOCK)]

    @property
    def nbytes(self) -> int:
        return int(self.matrix.nbytes)


@dataclass(frozen=True)
class CompressedOperator:
    """R = H + C (see the module text).

    Attributes
    ----------
    hmatrix : HMatrix
        Hierarchical approximation of the midpoint kernel between segments, Ω (its ``near`` part is
        held in ``local``).
    local : scipy.sparse.csr_matrix
        The hierarchical matrix's near blocks plus the correction C (Galerkin minus midpoint values of the self,
        near and middle pairs), Ω: one sparse product.
    segments, kernel
        What the operator was built from (for exact sub-blocks).
    """

    hmatrix: HMatrix
    local: sp.csr_matrix
    segments: Segments
    kernel: SoilKernel
    kind: str = field(default="compressed", init=False)

    @property
    def size(self) -> int:
        return self.local.shape[0]

    def apply(self, x: np.ndarray) -> np.ndarray:
        """R x, V per A of x (x of shape (N,) or (N, k))."""
        return rows_product(self.local_rows, x) + self.hmatrix.far(x)

    @functools.cached_property
    def local_rows(self) -> list[sp.csr_matrix]:
        """The local matrix's rows in parts for the worker threads (:func:`~.hmatrix.row_parts`)."""
        return row_parts(self.local)

    def __getstate__(self) -> dict:
        """The operator without its row parts (views, remade on use)."""
        return {k: v for k, v in self.__dict__.items() if k != "local_rows"}

    @property
    def diagonal(self) -> np.ndarray:
        return self.local.diagonal()

    def block(self, idx: np.ndarray) -> np.ndarray:
        """R restricted to the segments ``idx``, exactly: the local matrix, and the midpoint kernel for the pairs
        the hierarchical matrix interpolates."""
        mid = self.segments.midpoint[idx]
        g = pair_values(self.kernel.potential, mid[:, None, :], mid[None, :, :])
        np.fill_diagonal(g, 0.0)
        g = 0.5 * (g + g.T)
        held = self.hmatrix.in_near(idx[:, None], idx[None, :])
        return np.where(held, 0.0, g) + self.local[idx][:, idx].toarray()

    def dense(self, limit: int = 20_000) -> np.ndarray:
        """R as a dense array (N ≤ ``limit``; for checks and small cases), Ω."""
        if self.size > limit:
            raise ValueError(f"{self.size} segments: a dense copy of the compressed operator is refused above {limit}")
        return self.apply(np.eye(self.size))

    def blocks(self) -> list[np.ndarray]:
        """The largest clusters of at most PRECONDITIONER_BLOCK segments: compact groups of segments."""
        tree = self.hmatrix.target_tree
        out, todo = [], list(tree.roots)
        while todo:
            c = todo.pop()
            if tree.size[c] <= PRECONDITIONER_BLOCK or tree.is_leaf[c]:
                out.append(np.sort(tree.members(c)))
            else:
                todo.extend(tree.children[c])
        return out

    @property
    def nbytes(self) -> int:
        l = self.local
        return self.hmatrix.nbytes + int(l.data.nbytes + l.indices.nbytes + l.indptr.nbytes)


def dense_operator(segments: Segments, kernel: SoilKernel, options: AssemblyOptions = AssemblyOptions(),
                   progress: Progress | None = None) -> DenseOperator:
    """The dense operator: the assembled matrix."""
    return DenseOperator(assemble(segments, kernel, options, progress))


def midpoint_values(segments: Segments, kernel: SoilKernel, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    """G between the midpoints of segment pairs (i, j), Ω; 0 where the midpoints coincide."""
    mid = segments.midpoint
    g = pair_values(kernel.potential, mid[i], mid[j])
    g[i == j] = 0.0
    return g


def compressed_operator(segments: Segments, kernel: SoilKernel, options: AssemblyOptions = AssemblyOptions(),
                        progress: Progress | None = None) -> CompressedOperator:
    """The compressed operator; memory and time grow about as N log N.

    The correction is added in place to the hierarchical matrix's near part, whose pattern was built to hold
    every corrected pair: one sparse matrix, no second one nor a sum of two (the transient copies that set the
    build's peak memory)."""
    if progress:
        progress("assemble", 0.0)
    mid = segments.midpoint
    near, middle = (p.astype(np.int32) for p in near_pairs(segments, options))
    H = build_hmatrix(kernel.potential, mid, target_layer=kernel.layer_of(mid[:, 2]), progress=progress,
                      label="assemble", pattern=(near, middle))
    local = H.near
    local.sort_indices()
    n = len(segments)
    keys = np.repeat(np.arange(n, dtype=np.int64), np.diff(local.indptr))      # (row · n + column) of each entry,
    keys *= n                                                                   # ascending once the rows are sorted
    keys += local.indices
    chunks = [(pairs[a:a + PAIR_CHUNK], exact) for pairs, exact in ((near, True), (middle, False))
              for a in range(0, len(pairs), PAIR_CHUNK)]

    def place(a, b):
        """Positions in ``local.data`` of the entries (a, b)."""
        k = a.astype(np.int64) * n + b
        order = np.argsort(k)                  # sorted needles: each search starts where the last one ended
        at = np.empty(len(k), np.int64)
        at[order] = np.searchsorted(keys, k[order])
        if not np.array_equal(keys[np.minimum(at, len(keys) - 1)], k):
            raise RuntimeError("compressed operator: a corrected pair is missing from the near pattern")
        return at

    def correct(item):
        p, exact = item
        i, j = p[:, 0], p[:, 1]
        v = (near_values(segments, kernel, i, j) if exact else middle_values(segments, kernel, i, j)) \
            - midpoint_values(segments, kernel, i, j)
        off = i != j
        return place(i, j), place(j[off], i[off]), v, v[off]

    for at, back, v, w in threaded_map(correct, chunks):     # the searches on the worker threads, the sums here
        local.data[at] += v
        local.data[back] += w
    return CompressedOperator(replace(H, near=sp.csr_matrix((n, n))), local, segments, kernel)


def compressed_memory_bytes(n_segments: int) -> int:
    """Memory the compressed operator and the iterative solve need, bytes (an upper estimate: measured on
    flat grids of 5 m meshes at 2 m segments, two-layer soil, since the build writes its sparse matrices in
    place: operator 17 kB per segment, peak of the whole study 21.7 kB per segment at 241 216 segments (5.23 GB)
    and of the build 21.4 kB at 60 616; 25 kB leaves 15 % for layouts denser than those)."""
    return int(25_000 * n_segments)
