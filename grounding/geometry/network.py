"""The electrode metal as a circuit: nodes where segments meet, one branch per segment.

Segment ends closer than NODE_TOLERANCE are one node. A segment's leakage current is shared equally by
its two end nodes and its potential is the mean of theirs (the lumped π model of a short line), so the
segment–node relation is one sparse matrix A (N × n, ½ entries) used both ways.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

from .segments import NODE_TOLERANCE, Segments


@dataclass(frozen=True)
class MetalNetwork:
    """Nodes and branches of the electrode metal.

    Attributes
    ----------
    nodes : ndarray, shape (n, 3)
        Node positions, m.
    ends : ndarray of int, shape (N, 2)
        Start and end node of each segment.
    group : ndarray of int, shape (n,)
        Potential group of each node (0 the energised system; see :class:`grounding.geometry.Conductors`).
    """

    nodes: np.ndarray
    ends: np.ndarray
    group: np.ndarray

    @property
    def size(self) -> int:
        """Number of nodes."""
        return len(self.nodes)

    def incidence(self) -> sp.csr_matrix:
        """Node–branch incidence, +1 at a segment's start node, −1 at its end node, shape (n, N)."""
        N = len(self.ends)
        rows = np.concatenate([self.ends[:, 0], self.ends[:, 1]])
        vals = np.concatenate([np.ones(N), -np.ones(N)])
        return sp.csr_matrix((vals, (rows, np.concatenate([np.arange(N), np.arange(N)]))), shape=(self.size, N))

    def averaging(self) -> sp.csr_matrix:
        """Segment potential as the mean of its end nodes', shape (N, n)."""
        N = len(self.ends)
        rows = np.concatenate([np.arange(N), np.arange(N)])
        return sp.csr_matrix((np.full(2 * N, 0.5), (rows, self.ends.T.ravel())), shape=(N, self.size))

    def components(self) -> np.ndarray:
        """Label of the galvanically connected part each node belongs to."""
        adj = sp.csr_matrix((np.ones(len(self.ends)), (self.ends[:, 0], self.ends[:, 1])), shape=(self.size,) * 2)
        return connected_components(adj, directed=False)[1]

    def nearest_node(self, point, group: int = 0) -> tuple[int, float]:
        """The node of ``group`` nearest to ``point`` (x, y, z in m; or x, y in plan, where of nodes equally near
        the shallowest is taken) and its distance, m."""
        p = np.asarray(point, float)
        members = np.flatnonzero(self.group == group)
        d = np.linalg.norm(self.nodes[members, :len(p)] - p, axis=1)
        if len(p) == 2:
            d = np.where(d <= d.min() + 1e-6, d, np.inf)
            k = int(np.lexsort((self.nodes[members, 2], d))[0])
        else:
            k = int(np.argmin(d))
        return int(members[k]), float(d[k])


def metal_network(segments: Segments) -> MetalNetwork:
    """Nodes and branches of the segments."""
    ends = np.vstack([segments.start, segments.end])
    pairs = cKDTree(ends).query_pairs(NODE_TOLERANCE, output_type="ndarray").reshape(-1, 2)
    n2 = len(ends)
    adj = sp.csr_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(n2, n2))
    _, label = connected_components(adj, directed=False)
    first = np.full(label.max() + 1, -1)
    first[label[::-1]] = np.arange(n2)[::-1]                 # first end point of each node
    N = len(segments)
    node_ends = label.reshape(2, N).T
    group = np.zeros(len(first), int)
    seg_group = segments.group
    group[node_ends[:, 0]] = seg_group
    group[node_ends[:, 1]] = seg_group
    return MetalNetwork(ends[first], node_ends, group)
