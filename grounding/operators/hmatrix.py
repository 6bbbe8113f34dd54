"""Hierarchical matrices: a kernel matrix K_ij = G(x_i, y_j) with its far blocks interpolated.

The points are ordered by a cluster tree (recursive bisection of the bounding box along its longest
side; points in different soil layers are split apart first, so that no cluster straddles an
interface, where the kernel has a kink). A pair of clusters (T, S) is *admissible* when the distance
between their boxes is at least ``1/eta`` times the larger box diagonal; the block partition is the
coarsest one made of admissible blocks and of pairs of leaves (Hackbusch, *Hierarchical Matrices*,
Springer 2015, ch. 5).

An admissible block is replaced by its tensor-product Chebyshev interpolation (Börm & Grasedyck,
"Low-rank approximation of integral operators by interpolation", Computing 72, 2004):

    K|_{T×S} ≈ U_T · G(ξ_T, ξ_S) · U_Sᵀ,

U_T the Lagrange polynomials of cluster T's nodes ξ_T evaluated at its points. In a coordinate where a
cluster's points all agree (all segments of a flat grid at one depth, a run of one straight conductor),
one node suffices and the interpolation in that coordinate is exact. The kernel is only ever evaluated point to point, so one
implementation serves every soil model.

All three factors are stored as sparse matrices, so that K x = N x + Uᵀ (C (V x)) costs a few sparse
products: N the leaf pairs that are not admissible (evaluated exactly), C the node-to-node couplings.
"""

from __future__ import annotations

import functools
import os
from collections import deque
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Callable

import numpy as np
import scipy.sparse as sp

#: G(r, z, z'): horizontal distance r and depths z, z' (m) of point pairs, broadcast → kernel values.
Kernel = Callable[[np.ndarray, np.ndarray, np.ndarray], np.ndarray]
Progress = Callable[[str, float], None]

#: Chebyshev nodes per horizontal coordinate of a cluster.
NODES_XY = 5
#: Chebyshev nodes in depth for clusters whose points lie at more distinct depths.
NODES_Z = 4
#: Admissibility: box distance ≥ larger box diagonal / ETA.
ETA = 1.5
#: Largest cluster that is not split further.
LEAF_SIZE = 32
#: Kernel values evaluated per chunk while building.
CHUNK = 2_000_000
#: From this many stored entries a sparse product is split by rows over the worker threads (scipy's sparse
#: products release the GIL). Measured on the benchmark yard's coupling matrix (19.7 M entries): 15 -> 9 ms.
PARALLEL_ENTRIES = 1_000_000
#: Coordinates that differ by less than this are one value (m).
QUANTUM = 1e-9


@dataclass(frozen=True)
class ClusterTree:
    """Clusters of points; cluster c holds the points ``order[start[c]:stop[c]]``.

    Attributes
    ----------
    order : ndarray of int, shape (n,)
        The points in tree order.
    start, stop : ndarray of int, shape (C,)
        Each cluster's range in ``order``.
    lo, hi : ndarray, shape (C, 3)
        Bounding box of each cluster, m.
    children : ndarray of int, shape (C, 2)
        The two children of each cluster, −1 for leaves.
    roots : ndarray of int
        The clusters without parent (one per soil layer holding points).
    """

    order: np.ndarray
    start: np.ndarray
    stop: np.ndarray
    lo: np.ndarray
    hi: np.ndarray
    children: np.ndarray
    roots: np.ndarray

    @property
    def size(self) -> np.ndarray:
        """Points per cluster."""
        return self.stop - self.start

    @property
    def is_leaf(self) -> np.ndarray:
        """True for clusters without children."""
        return self.children[:, 0] < 0

    def members(self, c: int) -> np.ndarray:
        """Indices of the points of cluster c."""
        return self.order[self.start[c]:self.stop[c]]


def cluster_tree(points: np.ndarray, layer: np.ndarray | None = None, leaf_size: int = LEAF_SIZE) -> ClusterTree:
    """Recursive bisection of ``points`` (m, shape (n, 3)); ``layer`` (int per point) keeps layers apart."""
    points = np.asarray(points, float)
    n = len(points)
    layer = np.zeros(n, int) if layer is None else np.asarray(layer, int)
    order = np.argsort(layer, kind="stable")
    start, stop, children = [], [], []
    roots = []
    bounds = np.flatnonzero(np.diff(layer[order])) + 1
    for a, b in zip(np.r_[0, bounds], np.r_[bounds, n]):
        roots.append(len(start))
        start.append(int(a)); stop.append(int(b)); children.append([-1, -1])
    todo = list(roots)
    while todo:
        c = todo.pop()
        a, b = start[c], stop[c]
        if b - a <= leaf_size:
            continue
        idx = order[a:b]
        p = points[idx]
        extent = p.max(axis=0) - p.min(axis=0)
        axis = int(np.argmax(extent))
        if extent[axis] <= QUANTUM:
            continue                                   # coincident points: nothing to split
        half = (b - a) // 2
        part = np.argpartition(p[:, axis], half)
        order[a:b] = idx[part]
        kids = []
        for lo_, hi_ in ((a, a + half), (a + half, b)):
            kids.append(len(start))
            start.append(lo_); stop.append(hi_); children.append([-1, -1])
        children[c] = kids
        todo.extend(kids)
    start, stop = np.array(start), np.array(stop)
    lo = np.empty((len(start), 3))
    hi = np.empty((len(start), 3))
    ordered = points[order]
    for c in range(len(start)):
        seg = ordered[start[c]:stop[c]]
        lo[c] = seg.min(axis=0)
        hi[c] = seg.max(axis=0)
    return ClusterTree(order, start, stop, lo, hi, np.array(children, int).reshape(-1, 2), np.array(roots, int))


def block_partition(target: ClusterTree, source: ClusterTree, eta: float = ETA,
                    symmetric: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """Admissible cluster pairs and pairs of leaves that are not, each an (k, 2) array (target, source).

    With ``symmetric`` (target and source the same tree) only one of the pairs (t, s) and (s, t) is returned."""
    pairs = np.array([(t, s) for t in target.roots for s in source.roots if not (symmetric and t > s)],
                     int).reshape(-1, 2)
    far, near = [], []
    while len(pairs):
        t, s = pairs[:, 0], pairs[:, 1]
        gap = np.maximum(0.0, np.maximum(source.lo[s] - target.hi[t], target.lo[t] - source.hi[s]))
        dist = np.linalg.norm(gap, axis=1)
        diam = np.maximum(np.linalg.norm(target.hi[t] - target.lo[t], axis=1),
                          np.linalg.norm(source.hi[s] - source.lo[s], axis=1))
        ok = eta * dist >= diam
        far.append(pairs[ok & (dist > 0)])
        rest = pairs[~(ok & (dist > 0))]
        t, s = rest[:, 0], rest[:, 1]
        lt, ls = target.is_leaf[t], source.is_leaf[s]
        near.append(rest[lt & ls])
        nxt = []
        both = ~lt & ~ls
        for a in (0, 1):
            for b in (0, 1):
                # a diagonal pair (t, t) of a symmetric matrix splits into (1, 1), (1, 2), (2, 2) only
                sel = both & (t != s) if (symmetric and a > b) else both
                nxt.append(np.column_stack([target.children[t[sel], a], source.children[s[sel], b]]))
        only_t = ~lt & ls
        only_s = lt & ~ls
        for a in (0, 1):
            nxt.append(np.column_stack([target.children[t[only_t], a], s[only_t]]))
            nxt.append(np.column_stack([t[only_s], source.children[s[only_s], a]]))
        pairs = np.vstack(nxt)
    return np.vstack(far), np.vstack(near)


def _chebyshev(lo: np.ndarray, hi: np.ndarray, p: int) -> np.ndarray:
    """p Chebyshev nodes of the first kind on each interval [lo, hi], shape (g, p)."""
    k = np.arange(p)
    return 0.5 * (lo + hi)[:, None] + 0.5 * (hi - lo)[:, None] * np.cos((2 * k + 1) * np.pi / (2 * p))[None, :]


def _lagrange(v: np.ndarray, nodes: np.ndarray) -> np.ndarray:
    """Lagrange polynomials of ``nodes`` (g, p) at values v (g, n), shape (g, n, p)."""
    p = nodes.shape[1]
    if p == 1:
        return np.ones(v.shape + (1,))
    gap = nodes[:, :, None] - nodes[:, None, :]                         # (g, k, j)
    idx = np.arange(p)
    gap[:, idx, idx] = 1.0
    factor = (v[:, :, None, None] - nodes[:, None, None, :]) / gap[:, None, :, :]     # (g, n, k, j)
    factor[:, :, idx, idx] = 1.0
    return factor.prod(axis=3)


@dataclass(frozen=True)
class ClusterBasis:
    """Interpolation nodes of clusters and the sparse map from point values to node values.

    Attributes
    ----------
    nodes : ndarray, shape (m, 3)
        All clusters' nodes, m.
    first, count : ndarray of int, shape (C,)
        Where each cluster's nodes start in ``nodes`` and how many it has (0 when unused).
    matrix : scipy.sparse.csr_matrix, shape (m, n)
        Row k holds the weights of the points of node k's cluster (U_Tᵀ stacked).
    """

    nodes: np.ndarray
    first: np.ndarray
    count: np.ndarray
    matrix: sp.csr_matrix


def _basis_layout(tree: ClusterTree, used: np.ndarray, nodes_xy: int, nodes_z: int):
    """Node counts of the clusters ``used``: (used, nodes per axis (k, 3), first node, node count, total)."""
    used = np.unique(used)
    first = np.zeros(len(tree.start), int)
    count = np.zeros(len(tree.start), int)
    extent = tree.hi[used] - tree.lo[used]
    flat = extent <= QUANTUM * (1.0 + np.abs(tree.lo[used]))
    per_axis = np.where(flat, 1, np.array([nodes_xy, nodes_xy, nodes_z])[None, :])
    k_of = per_axis.prod(axis=1)
    first[used] = np.r_[0, np.cumsum(k_of)[:-1]]
    count[used] = k_of
    return used, per_axis, first, count, int(k_of.sum())


def _basis_groups(tree: ClusterTree, points: np.ndarray, used, per_axis, first, weights: bool = True):
    """Clusters of equal size and node pattern, a group at a time: (point indices (g, n), node indices
    (g, k), node coordinates (g, k, 3), interpolation weights (g, n, k) or None)."""
    key = (tree.size[used].astype(np.int64) * 1000 + per_axis[:, 0] * 100 + per_axis[:, 1] * 10 + per_axis[:, 2])
    for value in np.unique(key):
        sel = key == value
        g, pa = used[sel], per_axis[np.flatnonzero(sel)[0]]
        n = int(tree.size[g[0]])
        idx = tree.order[tree.start[g][:, None] + np.arange(n)[None, :]]              # (g, n)
        axis_nodes, axis_weights = [], []
        for d in range(3):
            nd = tree.lo[g, d][:, None] if pa[d] == 1 else _chebyshev(tree.lo[g, d], tree.hi[g, d], int(pa[d]))
            axis_nodes.append(nd)
            if weights:
                axis_weights.append(_lagrange(points[idx, d], nd))
        shape = (len(g), int(pa[0]), int(pa[1]), int(pa[2]))
        grid = np.stack([np.broadcast_to(axis_nodes[0][:, :, None, None], shape),
                         np.broadcast_to(axis_nodes[1][:, None, :, None], shape),
                         np.broadcast_to(axis_nodes[2][:, None, None, :], shape)], axis=-1).reshape(len(g), -1, 3)
        at = first[g][:, None] + np.arange(grid.shape[1])[None, :]                        # (g, k)
        w = None
        if weights:
            wx, wy, wz = axis_weights
            w = (wx[:, :, :, None, None] * wy[:, :, None, :, None] * wz[:, :, None, None, :]).reshape(len(g), n, -1)
        yield idx, at, grid, w


def cluster_basis(tree: ClusterTree, points: np.ndarray, used: np.ndarray,
                  nodes_xy: int = NODES_XY, nodes_z: int = NODES_Z) -> ClusterBasis:
    """Tensor-product Chebyshev interpolation bases of the clusters ``used`` (indices into the tree).

    A coordinate in which all of a cluster's points agree gets one node (the interpolation is exact
    there: a flat grid needs no nodes in depth). Clusters of equal size and node pattern are done together.
    """
    used, per_axis, first, count, m = _basis_layout(tree, used, nodes_xy, nodes_z)
    nodes = np.zeros((m, 3))
    # row k (a node of cluster c) holds the weights of c's points: row pointers first, then the values in place
    row_len = np.repeat(tree.size[used].astype(np.int64), count[used])
    indptr = np.zeros(m + 1, np.int64)
    np.cumsum(row_len, out=indptr[1:])
    idx_type = np.int32 if max(int(indptr[-1]), m, len(points)) < 2 ** 31 else np.int64
    indices, data = np.empty(int(indptr[-1]), idx_type), np.empty(int(indptr[-1]))
    for idx, at, grid, w in _basis_groups(tree, points, used, per_axis, first):
        nodes[at.ravel()] = grid.reshape(-1, 3)
        pos = indptr[at][:, :, None] + np.arange(idx.shape[1])                          # (g, k, n)
        indices[pos] = np.broadcast_to(idx[:, None, :], pos.shape)
        data[pos] = np.swapaxes(w, 1, 2)
    matrix = sp.csr_matrix((data, indices, indptr.astype(idx_type)), shape=(m, len(points)), copy=False)
    return ClusterBasis(nodes, first, count, matrix)


def pair_values(kernel: Kernel, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """G between point arrays of equal leading shape x (…, 3) and y (…, 3), non-finite values → 0."""
    r = np.hypot(x[..., 0] - y[..., 0], x[..., 1] - y[..., 1])
    with np.errstate(divide="ignore", invalid="ignore"):
        v = kernel(r, x[..., 2], y[..., 2])
    v[~np.isfinite(v)] = 0.0
    return v


def _block_values(kernel: Kernel, blocks: np.ndarray, t_first, t_count, t_pts, s_first, s_count, s_pts,
                  t_index, s_index, t_depth, s_depth, progress: Progress | None, label: str, then=None):
    """Dense blocks between ranges of two point sets, a chunk at a time: (blocks (g, 2), target indices
    (g, a), source indices (g, b), kernel values (g, a, b)). ``then``: called with those four on the worker
    thread that made them (e.g. to write them into place), so that the caller's thread does not do it alone.

    ``t_first``/``t_count`` give each target cluster's range in ``t_index`` (into ``t_pts``), likewise
    for the sources; ``t_depth``/``s_depth`` are a cluster's quantised depth where all its points share it
    (else a value no depth takes). Blocks are grouped by shape and depth, so that each group has one depth
    pair where the clusters are flat: layered kernels then use one radial table instead of their series."""
    if len(blocks) == 0:
        return
    keys = np.column_stack([t_count[blocks[:, 0]], s_count[blocks[:, 1]], t_depth[blocks[:, 0]], s_depth[blocks[:, 1]]])
    uniq, inverse = np.unique(keys, axis=0, return_inverse=True)
    inverse = inverse.ravel()
    total = max(1, int(np.sum(t_count[blocks[:, 0]].astype(np.int64) * s_count[blocks[:, 1]])))
    tasks = []
    for u, key in enumerate(uniq):
        grp = blocks[inverse == u]
        a, b = int(key[0]), int(key[1])
        if a and b:
            per = max(1, CHUNK // (a * b))
            tasks += [(grp[k:k + per], a, b) for k in range(0, len(grp), per)]

    def evaluate(task):
        g, a, b = task
        it = t_index[t_first[g[:, 0]][:, None] + np.arange(a)[None, :]]        # (g, a)
        js = s_index[s_first[g[:, 1]][:, None] + np.arange(b)[None, :]]        # (g, b)
        v = pair_values(kernel, t_pts[it][:, :, None, :], s_pts[js][:, None, :, :])
        if then is not None:
            then(g, it, js, v)
        return g, it, js, v

    done = 0
    for result in threaded_map(evaluate, tasks):
        yield result
        done += result[3].size
        if progress:
            progress(label, done / total)


def worker_threads() -> int:
    """Threads for chunked array work (numpy releases the GIL in it): the machine's cores, at most 4."""
    return max(1, min(4, os.cpu_count() or 1))


def threaded_map(function, items, window: int | None = None):
    """``map(function, items)`` on worker threads, in order, with at most ``window`` results pending
    (so that memory stays bounded when the consumer is slower)."""
    workers = worker_threads()
    window = window or 2 * workers
    if workers == 1 or len(items) < 2:
        yield from map(function, items)
        return
    with ThreadPoolExecutor(max_workers=workers) as pool:
        pending = deque()
        for item in items:
            pending.append(pool.submit(function, item))
            if len(pending) >= window:
                yield pending.popleft().result()
        while pending:
            yield pending.popleft().result()


def row_parts(a: sp.csr_matrix) -> list[sp.csr_matrix]:
    """A CSR matrix's rows in consecutive parts of about equal entries, one per worker thread (views of its arrays;
    one part for small matrices), for :func:`rows_product`."""
    workers = worker_threads()
    if workers == 1 or a.nnz < PARALLEL_ENTRIES:
        return [a]
    cuts = np.searchsorted(a.indptr, np.linspace(0, a.nnz, workers + 1)[1:-1])
    bounds = [0, *sorted({int(c) for c in cuts} - {0, a.shape[0]}), a.shape[0]]
    parts = []
    for r0, r1 in zip(bounds[:-1], bounds[1:]):
        e0, e1 = a.indptr[r0], a.indptr[r1]
        # the arrays are set after construction: scipy's constructor copies a view that is less than half of its
        # base (its "prune"), which made each part a copy: the yard's coupling, 19.7 M entries, 0.8 s and 236 MB
        part = sp.csr_matrix((r1 - r0, a.shape[1]), dtype=a.dtype)
        part.indptr, part.indices, part.data = a.indptr[r0:r1 + 1] - e0, a.indices[e0:e1], a.data[e0:e1]
        parts.append(part)
    return parts


def rows_product(parts: list[sp.csr_matrix], x: np.ndarray) -> np.ndarray:
    """The product of the matrix split by :func:`row_parts` with x, the parts on the worker threads (scipy's sparse
    products release the GIL; each row's sum is the same as in one product, so the values equal it to the last
    digit)."""
    if len(parts) == 1:
        return parts[0] @ x
    return np.concatenate(list(threaded_map(lambda p: p @ x, parts)))


def _ragged(first: np.ndarray, count: np.ndarray) -> np.ndarray:
    """first[k] + 0 … count[k] − 1 for every k, concatenated."""
    count = np.asarray(count, np.int64)
    total = int(count.sum())
    if total == 0:
        return np.zeros(0, np.int64)
    starts = np.cumsum(count) - count
    return np.repeat(np.asarray(first, np.int64) - starts, count) + np.arange(total)


def _block_csr(kernel: Kernel, blocks: np.ndarray, t_first, t_count, t_pts, s_first, s_count, s_pts,
               t_index, s_index, t_depth, s_depth, symmetric: bool, progress: Progress | None, label: str,
               shape: tuple[int, int], zero_diagonal: bool = False, extra: np.ndarray | None = None) -> sp.csr_matrix:
    """The CSR matrix of the dense blocks of :func:`_block_values`, written straight into its final arrays.

    Every row belongs to one target cluster and all rows of a cluster hold the same blocks, so each block's place
    in its rows is known before any value is: row pointers first, then each chunk of values into place (12 bytes
    an entry in all, no coordinate lists nor sorting). With ``symmetric`` each block (t, s), t ≠ s, also fills its
    transpose and diagonal blocks are made exactly symmetric; ``zero_diagonal``: entries (i, i) are 0; ``extra``:
    index pairs (k, 2) held with the value 0 at the end of their rows. No (row, column) may repeat."""
    extra = np.zeros((0, 2), np.int64) if extra is None else np.asarray(extra, np.int64)
    blocks = np.asarray(blocks, np.int64).reshape(-1, 2)
    nb = len(blocks)
    # oriented blocks: (t, s) each, and (s, t) for the off-diagonal blocks of a symmetric matrix
    mirror = np.flatnonzero(blocks[:, 0] != blocks[:, 1]) if symmetric else np.zeros(0, np.int64)
    tgt = np.concatenate([blocks[:, 0], blocks[mirror, 1]])
    width = np.concatenate([s_count[blocks[:, 1]], t_count[blocks[mirror, 0]]]).astype(np.int64)
    order = np.argsort(tgt, kind="stable")
    within = np.cumsum(width[order]) - width[order]                    # running width over all oriented blocks …
    group_start = np.searchsorted(tgt[order], tgt[order])              # … less that before this target's first
    offset = np.empty(len(tgt), np.int64)
    offset[order] = within - within[group_start]
    cluster_width = np.bincount(tgt, width, minlength=len(t_count)).astype(np.int64)
    # row pointers: a row's blocks, then its extra entries
    row_len = np.zeros(shape[0], np.int64)
    clusters = np.flatnonzero(cluster_width)
    row_len[t_index[_ragged(t_first[clusters], t_count[clusters])]] = np.repeat(cluster_width[clusters],
                                                                               t_count[clusters])
    extra_at = row_len.copy()
    row_len += np.bincount(extra[:, 0], minlength=shape[0]).astype(np.int64)
    indptr = np.zeros(shape[0] + 1, np.int64)
    np.cumsum(row_len, out=indptr[1:])
    nnz = int(indptr[-1])
    idx_type = np.int32 if max(nnz, *shape) < 2 ** 31 else np.int64
    indices, data = np.empty(nnz, idx_type), np.empty(nnz)
    if len(extra):
        order_e = np.argsort(extra[:, 0], kind="stable")
        e = extra[order_e]
        rank = np.arange(len(e)) - np.searchsorted(e[:, 0], e[:, 0])   # place among its row's extras
        pos = indptr[e[:, 0]] + extra_at[e[:, 0]] + rank
        indices[pos] = e[:, 1]
        data[pos] = 0.0
    back = np.full(nb, -1, np.int64)
    back[mirror] = nb + np.arange(len(mirror))
    ids = np.column_stack([blocks, np.arange(nb)])

    def place(g, it, js, v):
        """Write a chunk of blocks into its places (on the worker thread; chunks own disjoint places)."""
        a, b = it.shape[1], js.shape[1]
        diag = g[:, 0] == g[:, 1]
        if symmetric and diag.any():
            v[diag] = 0.5 * (v[diag] + np.swapaxes(v[diag], 1, 2))
        if zero_diagonal and diag.any():
            v[diag] = np.where(it[diag][:, :, None] == js[diag][:, None, :], 0.0, v[diag])
        pos = (indptr[it] + offset[g[:, 2]][:, None])[:, :, None] + np.arange(b)
        indices[pos] = np.broadcast_to(js[:, None, :], v.shape)
        data[pos] = v
        if symmetric:
            off = ~diag
            if off.any():
                pos = (indptr[js[off]] + offset[back[g[off, 2]]][:, None])[:, :, None] + np.arange(a)
                indices[pos] = np.broadcast_to(it[off][:, None, :], (int(off.sum()), b, a))
                data[pos] = np.swapaxes(v[off], 1, 2)

    for _ in _block_values(kernel, ids, t_first, t_count, t_pts, s_first, s_count, s_pts, t_index, s_index, t_depth,
                           s_depth, progress, label, then=place):
        pass
    return sp.csr_matrix((data, indices, indptr.astype(idx_type)), shape=shape, copy=False)


@dataclass(frozen=True)
class HMatrix:
    """K ≈ near + Uᵀ · coupling · V, K of shape (M, N) (see the module text).

    Attributes
    ----------
    near : scipy.sparse.csr_matrix, shape (M, N)
        Kernel values of point pairs in leaf pairs that are not admissible (coincident points: 0).
    target_basis : ClusterBasis
        Node bases of the target clusters (U stacked, shape (m_t, M)).
    coupling : scipy.sparse.csr_matrix, shape (m_t, m_s)
        Kernel values between the nodes of admissible cluster pairs.
    source_basis : ClusterBasis
        Node bases of the source clusters (V, shape (m_s, N)).
    admissible_blocks, near_blocks : int
        Counts of the two kinds of blocks.
    target_tree, source_tree : ClusterTree
        The cluster trees (the same object for a symmetric matrix).
    leaf_of : ndarray of int, shape (M,), optional
        Symmetric matrix: the leaf cluster of each point.
    near_keys : ndarray of int64, optional
        Symmetric matrix: the leaf pairs held in ``near``, as sorted keys min(t, s)·C + max(t, s), C clusters
        (see :meth:`in_near`).
    """

    near: sp.csr_matrix
    target_basis: ClusterBasis
    coupling: sp.csr_matrix
    source_basis: ClusterBasis
    admissible_blocks: int
    near_blocks: int
    target_tree: ClusterTree
    source_tree: ClusterTree
    leaf_of: np.ndarray | None = None
    near_keys: np.ndarray | None = None

    def in_near(self, i: np.ndarray, j: np.ndarray) -> np.ndarray:
        """Whether the kernel values of point pairs (i, j) of a symmetric matrix are held in ``near`` (not
        interpolated)."""
        return _holds(self.near_keys, _leaf_pair_keys(self.leaf_of[i], self.leaf_of[j], len(self.target_tree.start)))

    @property
    def shape(self) -> tuple[int, int]:
        return self.near.shape

    def far(self, x: np.ndarray) -> np.ndarray:
        """The interpolated part alone, Uᵀ C V x."""
        return self.target_basis.matrix.T @ rows_product(self.coupling_rows, self.source_basis.matrix @ x)

    @functools.cached_property
    def coupling_rows(self) -> list[sp.csr_matrix]:
        """The coupling matrix's rows in parts for the worker threads (:func:`row_parts`)."""
        return row_parts(self.coupling)

    def __getstate__(self) -> dict:
        """The matrix without its row parts (views, remade on use)."""
        return {k: v for k, v in self.__dict__.items() if k != "coupling_rows"}

    def matvec(self, x: np.ndarray) -> np.ndarray:
        """K x (x of shape (N,) or (N, k))."""
        return self.near @ x + self.far(x)

    @property
    def nbytes(self) -> int:
        """Memory held by the sparse factors, bytes."""
        mats = (self.near, self.coupling, self.target_basis.matrix, self.source_basis.matrix)
        return int(sum(m.data.nbytes + m.indices.nbytes + m.indptr.nbytes for m in mats))


def _flat_depth(tree: ClusterTree) -> np.ndarray:
    """Each cluster's depth in quanta where all its points share one depth, else −1 (depths are ≥ 0)."""
    flat = tree.hi[:, 2] - tree.lo[:, 2] <= QUANTUM
    return np.where(flat, np.round(tree.lo[:, 2] / QUANTUM), -1).astype(np.int64)


def leaf_of_points(tree: ClusterTree) -> np.ndarray:
    """The leaf cluster holding each point (the leaves' ranges partition the tree order)."""
    leaves = np.flatnonzero(tree.is_leaf)
    leaves = leaves[np.argsort(tree.start[leaves])]
    out = np.empty(len(tree.order), np.int64)
    out[tree.order] = np.repeat(leaves, tree.size[leaves])
    return out


def _leaf_pair_keys(a: np.ndarray, b: np.ndarray, clusters: int) -> np.ndarray:
    """Order-free keys of leaf pairs: min·C + max."""
    a, b = np.asarray(a, np.int64), np.asarray(b, np.int64)
    return np.minimum(a, b) * clusters + np.maximum(a, b)


def _holds(sorted_keys: np.ndarray, keys: np.ndarray) -> np.ndarray:
    """Whether each of ``keys`` is in ``sorted_keys``."""
    if len(sorted_keys) == 0:
        return np.zeros(np.shape(keys), bool)
    at = np.minimum(np.searchsorted(sorted_keys, keys), len(sorted_keys) - 1)
    return sorted_keys[at] == keys


def build_hmatrix(kernel: Kernel, targets: np.ndarray, sources: np.ndarray | None = None,
                  target_layer: np.ndarray | None = None, source_layer: np.ndarray | None = None,
                  eta: float = ETA, leaf_size: int = LEAF_SIZE, nodes_xy: int = NODES_XY, nodes_z: int = NODES_Z,
                  progress: Progress | None = None, label: str = "compress",
                  pattern: tuple[np.ndarray, ...] = ()) -> HMatrix:
    """Hierarchical approximation of K_ij = kernel(x_i, y_j).

    Parameters
    ----------
    kernel : callable
        G(r, z, z') for horizontal distance r and depths z (target), z' (source), m → kernel units.
    targets : ndarray, shape (M, 3)
        Target points x_i, m.
    sources : ndarray, shape (N, 3), optional
        Source points y_j, m; None means the targets (a symmetric matrix, its diagonal set to 0).
    target_layer, source_layer : ndarray of int, optional
        Soil layer of each point; clusters never mix layers.
    eta : float
        Admissibility parameter (larger: more blocks compressed, less accurate).
    leaf_size : int
        Largest cluster not split.
    nodes_xy, nodes_z : int
        Chebyshev nodes per horizontal coordinate and in depth.
    progress : callable, optional
        Called as progress(label, fraction).
    pattern : tuple of ndarray of int, each of shape (k, 2), optional
        Symmetric matrix: point pairs (i ≤ j) the ``near`` matrix must hold an entry for, both ways; pairs the
        near blocks do not cover get an explicit 0 (room for a later sparse correction, added in place).
    """
    symmetric = sources is None
    targets = np.asarray(targets, float)
    t_tree = cluster_tree(targets, target_layer, leaf_size)
    if symmetric:
        sources, s_tree = targets, t_tree
    else:
        sources = np.asarray(sources, float)
        s_tree = cluster_tree(sources, source_layer, leaf_size)
    far, near = block_partition(t_tree, s_tree, eta, symmetric)
    tb = cluster_basis(t_tree, targets, far[:, 0] if not symmetric else far.ravel(), nodes_xy, nodes_z)
    sb = tb if symmetric else cluster_basis(s_tree, sources, far[:, 1], nodes_xy, nodes_z)
    t_depth, s_depth = _flat_depth(t_tree), _flat_depth(s_tree)
    coupling = _block_csr(kernel, far, tb.first, tb.count, tb.nodes, sb.first, sb.count, sb.nodes,
                          np.arange(len(tb.nodes)), np.arange(len(sb.nodes)), t_depth, s_depth, symmetric,
                          progress, label, (len(tb.nodes), len(sb.nodes)))
    leaf_of = near_keys = extra = None
    if symmetric:
        leaf_of = leaf_of_points(t_tree)
        near_keys = np.sort(_leaf_pair_keys(near[:, 0], near[:, 1], len(t_tree.start)))
        outside = [P[~_holds(near_keys, _leaf_pair_keys(leaf_of[P[:, 0]], leaf_of[P[:, 1]], len(t_tree.start)))]
                   for P in (pattern or ())]
        if outside:
            out = np.vstack(outside).astype(np.int64)
            extra = np.vstack([out, out[out[:, 0] != out[:, 1]][:, ::-1]])
    near_m = _block_csr(kernel, near, t_tree.start, t_tree.size, targets, s_tree.start, s_tree.size, sources,
                        t_tree.order, s_tree.order, t_depth, s_depth, symmetric, progress, label,
                        (len(targets), len(sources)), zero_diagonal=symmetric, extra=extra)
    return HMatrix(near_m, tb, coupling, sb, len(far), len(near), t_tree, s_tree, leaf_of, near_keys)


class SourceMoments:
    """Node values of the source clusters' interpolation (the weights of a cluster's points times their strengths,
    summed per node), made for a cluster the first time a product uses it and kept: the products of one set of
    sources at many target sets (a map, then its searches) share them.

    Parameters
    ----------
    tree : ClusterTree
        The sources' cluster tree.
    points : ndarray, shape (N, 3)
        Source points, m.
    x : ndarray, shape (N,)
        Source strengths.
    """

    def __init__(self, tree: ClusterTree, points: np.ndarray, x: np.ndarray, nodes_xy: int = NODES_XY,
                 nodes_z: int = NODES_Z):
        self.tree, self.points, self.x = tree, points, np.asarray(x, float)
        self.nodes_xy, self.nodes_z = nodes_xy, nodes_z
        clusters = len(tree.start)
        self.first = np.zeros(clusters, int)
        self.count = np.zeros(clusters, int)
        self.have = np.zeros(clusters, bool)
        self.nodes = np.zeros((0, 3))
        self.values = np.zeros(0)

    def of(self, used: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(first, count, nodes, values) holding at least the clusters ``used``: cluster c's nodes are
        ``nodes[first[c]:first[c] + count[c]]``."""
        used = np.unique(used)
        missing = used[~self.have[used]]
        if len(missing):
            done, axis, first, count, m = _basis_layout(self.tree, missing, self.nodes_xy, self.nodes_z)
            nodes, values = np.zeros((m, 3)), np.zeros(m)
            for idx, at, grid, w in _basis_groups(self.tree, self.points, done, axis, first):
                nodes[at.ravel()] = grid.reshape(-1, 3)
                values[at] = np.einsum("gnk,gn->gk", w, self.x[idx])
            self.first[done] = first[done] + len(self.nodes)
            self.count[done] = count[done]
            self.have[done] = True
            self.nodes = np.vstack([self.nodes, nodes])
            self.values = np.concatenate([self.values, values])
        return self.first, self.count, self.nodes, self.values


def apply_once(kernel: Kernel, targets: np.ndarray, sources: np.ndarray, x: np.ndarray,
               source_layer: np.ndarray | None = None, eta: float = ETA, leaf_size: int = LEAF_SIZE,
               nodes_xy: int = NODES_XY, nodes_z: int = NODES_Z, progress: Progress | None = None,
               label: str = "surface", source_tree: "ClusterTree | None" = None,
               moments: SourceMoments | None = None) -> np.ndarray:
    """K x for K_ij = kernel(x_i, y_j) by the same hierarchical approximation as :func:`build_hmatrix`,
    streamed block by block instead of stored: for a product needed once (a surface map), memory stays
    at the size of the node values and one chunk.

    Parameters
    ----------
    kernel : callable
        G(r, z, z'), see :func:`build_hmatrix`.
    targets : ndarray, shape (M, 3)
        Target points, m (one soil layer: the surface).
    sources : ndarray, shape (N, 3)
        Source points, m.
    x : ndarray, shape (N,)
        Source strengths.
    source_layer : ndarray of int, optional
        Soil layer of each source; clusters never mix layers.
    source_tree : ClusterTree, optional
        ``cluster_tree(sources, source_layer, leaf_size)`` kept from an earlier call with the same sources.
    moments : SourceMoments, optional
        The sources' node values kept between calls with the same sources, strengths and tree (made with
        ``source_tree``, ``nodes_xy`` and ``nodes_z``).
    """
    targets, sources, x = np.asarray(targets, float), np.asarray(sources, float), np.asarray(x, float)
    t_tree = cluster_tree(targets, None, leaf_size)
    s_tree = source_tree if source_tree is not None else cluster_tree(sources, source_layer, leaf_size)
    far, near = block_partition(t_tree, s_tree, eta)
    t_depth, s_depth = _flat_depth(t_tree), _flat_depth(s_tree)
    out = np.zeros(len(targets))
    # sources → node values
    moments = moments or SourceMoments(s_tree, sources, x, nodes_xy, nodes_z)
    s_first, s_count, s_nodes, w_nodes = moments.of(far[:, 1])
    m_s = len(s_nodes)
    t_used, t_axis, t_first, t_count, m_t = _basis_layout(t_tree, far[:, 0], nodes_xy, nodes_z)
    t_nodes = np.zeros((m_t, 3))
    for idx, at, grid, _ in _basis_groups(t_tree, targets, t_used, t_axis, t_first, weights=False):
        t_nodes[at.ravel()] = grid.reshape(-1, 3)
    # node couplings
    y_nodes = np.zeros(m_t)
    half = (lambda _l, f: progress(label, 0.5 * f)) if progress else None
    for _g, it, js, v in _block_values(kernel, far, t_first, t_count, t_nodes, s_first, s_count, s_nodes,
                                       np.arange(m_t), np.arange(m_s), t_depth, s_depth, half, label):
        y_nodes += np.bincount(it.ravel(), np.einsum("gab,gb->ga", v, w_nodes[js]).ravel(), minlength=m_t)
    # node potentials → targets
    for idx, at, _grid, w in _basis_groups(t_tree, targets, t_used, t_axis, t_first):
        out += np.bincount(idx.ravel(), np.einsum("gnk,gk->gn", w, y_nodes[at]).ravel(), minlength=len(out))
    # near blocks, exactly
    rest = (lambda _l, f: progress(label, 0.5 + 0.5 * f)) if progress else None
    for _g, it, js, v in _block_values(kernel, near, t_tree.start, t_tree.size, targets, s_tree.start, s_tree.size,
                                       sources, t_tree.order, s_tree.order, t_depth, s_depth, rest, label):
        out += np.bincount(it.ravel(), np.einsum("gab,gb->ga", v, x[js]).ravel(), minlength=len(out))
    return out
