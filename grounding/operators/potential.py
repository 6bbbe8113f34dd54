"""The potential operator: earth-surface potential of given segment currents at any points, with the assembly's near / middle / far tiers."""

from __future__ import annotations

from typing import Callable

import numpy as np
from scipy.spatial import cKDTree
from scipy.spatial.distance import cdist

from ..geometry.segments import Segments
from ..kernels.base import DEPTH_QUANTUM, SoilKernel
from ..kernels.integrals import GAUSS2, line_integral
from .assembly import MAX_DEPTH_CLASSES, AssemblyOptions, gauss_points, near_term_sum
from .hmatrix import LEAF_SIZE, SourceMoments, apply_once, cluster_tree, threaded_map

Progress = Callable[[str, float], None]


#: (point, segment) pairs per chunk of the direct far field: a chunk's arrays (8 bytes a pair) stay within a core's
#: cache. Measured on the benchmark yard (6 371 segments, 2 300 points, one thread): chunks of 2 048 points 0.42 s,
#: 512 points 0.19 s, 128 points 0.13 s.
POINT_PAIRS = 2 ** 18
#: Surface points per chunk of the direct far field, at most and at least.
POINT_CHUNK = 2048
MIN_POINT_CHUNK = 16
#: (point, segment) pairs per chunk of the near corrections.
PAIR_CHUNK = 100_000
#: From this many (point, segment) pairs the map's far field uses the hierarchical matrix.
COMPRESS_FROM_PAIRS = 50_000_000
#: From this many segments the far field of smaller point sets is compressed too, from this many pairs: the
#: sources' tree and node values are kept between calls, so that only the points' side is new. Measured at
#: 241 216 segments: 49 points 0.91 s direct, 0.33 s compressed; 196 points 2.99 s and 0.73 s (values within 2e-5).
COMPRESS_LARGE_SOURCES = (50_000, 10_000_000)


class SurfacePotential:
    """Earth-surface potential (V) of given segment currents, evaluated at any surface points.

    Parameters
    ----------
    segments : Segments
        The electrodes.
    currents : ndarray, shape (N,)
        Segment leakage currents, A.
    kernel : SoilKernel
        Soil Green's function.
    options : AssemblyOptions
        Tier limits, in segment lengths.
    """

    def __init__(self, segments: Segments, currents: np.ndarray, kernel: SoilKernel,
                 options: AssemblyOptions = AssemblyOptions()):
        self.segments, self.currents, self.kernel, self.options = segments, currents, kernel, options
        # phasor currents (conductors with impedance): the real and imaginary parts as two columns
        self.columns = np.column_stack([currents.real, currents.imag]) if np.iscomplexobj(currents) else \
            np.asarray(currents, float)[:, None]
        self.mid = segments.midpoint
        self.L = segments.length
        depth = np.round(self.mid[:, 2] / DEPTH_QUANTUM).astype(np.int64)
        classes, cls = np.unique(depth, return_inverse=True)
        # few burial depths: one radial function per depth; very many (sloping conductors): point pairs
        self.members = None if len(classes) > MAX_DEPTH_CLASSES else \
            [(kernel.radial(0.0, classes[k] * DEPTH_QUANTUM), np.flatnonzero(cls.ravel() == k))
             for k in range(len(classes))]
        self.tree = cKDTree(self.mid)
        self.source_tree = None                          # cluster tree of the Gauss points, made at first use,
        self.moments = None                              # and their node values (hmatrix.SourceMoments)

    def __call__(self, xy: np.ndarray, progress: Progress | None = None) -> np.ndarray:
        """Potential relative to remote earth (V) at surface points ``xy`` (m), shape (M, 2) → (M,)."""
        xy = np.atleast_2d(np.asarray(xy, float))
        m = len(xy)
        mid, L, currents, kernel = self.mid, self.L, self.columns, self.kernel
        k = currents.shape[1]
        out = np.zeros((m, k))
        a, b = self.segments.start, self.segments.end
        many, pairs = COMPRESS_LARGE_SOURCES
        compressed = m * len(mid) >= (pairs if len(mid) >= many else COMPRESS_FROM_PAIRS)
        if compressed:
            # large maps: the hierarchical far field of the segments' 2-point Gauss–Legendre sources (the
            # middle tier's rule, so that only near pairs need correcting), interpolated to about 1e-5
            sources = gauss_points(a, b).reshape(-1, 3)
            layers = kernel.layer_of(sources[:, 2])
            if self.source_tree is None:                 # the same sources at every call: their tree and node
                self.source_tree = cluster_tree(sources, layers, LEAF_SIZE)             # values made once
                self.moments = [SourceMoments(self.source_tree, sources, np.repeat(0.5 * currents[:, c], 2))
                                for c in range(k)]
            for c in range(k):
                out[:, c] += apply_once(kernel.potential, np.column_stack([xy, np.zeros(m)]), sources,
                                        np.repeat(0.5 * currents[:, c], 2), source_layer=layers,
                                        progress=(lambda _s, f: progress("surface", 0.8 * f)) if progress else None,
                                        source_tree=self.source_tree, moments=self.moments[c])

        def far(rows: slice):
            part = np.zeros((rows.stop - rows.start, k))
            if self.members is None:
                part += kernel.potential(cdist(xy[rows], mid[:, :2]), 0.0, mid[None, :, 2]) @ currents
            for radial, cols in self.members or ():
                part += radial(cdist(xy[rows], mid[cols, :2])) @ currents[cols]
            return rows, part

        # point chunks sized to the cache, on the worker threads (a point's value depends on its chunk only through the
        # matrix product's rounding: 1e-15 seen against chunks of 2 048 points)
        chunk = int(np.clip(POINT_PAIRS // max(len(mid), 1), MIN_POINT_CHUNK, POINT_CHUNK))
        for rows, part in threaded_map(far, [slice(s0, min(m, s0 + chunk)) for s0 in range(0, 0 if compressed else m,
                                                                                          chunk)]):
            out[rows] += part
            if progress:
                progress("surface", 0.8 * rows.stop / m)
        # near (and, for the midpoint far field, middle) corrections: accurate value minus the value added
        p3 = np.column_stack([xy, np.zeros(m)])
        tier = self.options.near_reach if compressed else self.options.mid_reach
        reach = tier * L.max()
        if m > 64:
            pairs = cKDTree(p3).sparse_distance_matrix(self.tree, reach, output_type="ndarray")
            pi, sj, d = pairs["i"].astype(np.intp), pairs["j"].astype(np.intp), pairs["v"]
        else:
            hits = self.tree.query_ball_point(p3, reach)
            pi = np.repeat(np.arange(m), [len(h) for h in hits]).astype(np.intp)
            sj = np.concatenate([np.asarray(h, dtype=np.intp) for h in hits]) if m else np.zeros(0, np.intp)
            d = np.linalg.norm(p3[pi] - mid[sj], axis=1)
        keep = d < tier * L[sj]
        pi, sj, d = pi[keep], sj[keep], d[keep]
        near = d < self.options.near_reach * L[sj]
        def correction(task):
            i, j, exact = task
            gauss = _gauss_point_values(kernel.potential, p3[i], a[j], b[j]) if compressed or not exact else None
            accurate = _near_point_values(p3[i], self.segments, kernel, j) if exact else gauss
            coarse = gauss if compressed else \
                kernel.potential(np.linalg.norm(p3[i, :2] - mid[j, :2], axis=1), 0.0, mid[j, 2])
            return np.column_stack([np.bincount(i, (accurate - coarse) * currents[j, c], minlength=m)
                                    for c in range(k)])

        tasks = []
        for sel, exact in ((near, True), (~near, False)):
            ii, jj = pi[sel], sj[sel]
            tasks += [(ii[s0:s0 + PAIR_CHUNK], jj[s0:s0 + PAIR_CHUNK], exact) for s0 in range(0, len(ii), PAIR_CHUNK)]
        for part in threaded_map(correction, tasks):
            out += part
        if progress:
            progress("surface", 1.0)
        return out[:, 0] + 1j * out[:, 1] if k == 2 else out[:, 0]


def surface_potential(xy: np.ndarray, segments: Segments, currents: np.ndarray, kernel: SoilKernel,
                      options: AssemblyOptions = AssemblyOptions(),
                      progress: Progress | None = None) -> np.ndarray:
    """Earth-surface potential (V) at points ``xy`` (m, shape (M, 2)); see :class:`SurfacePotential`."""
    return SurfacePotential(segments, currents, kernel, options)(xy, progress)


def _gauss_point_values(evaluate, p, a, b) -> np.ndarray:
    """Mean of the kernel over 2 Gauss points of each segment, seen from points p."""
    g = GAUSS2[0]
    q = a[:, None, :] + g[None, :, None] * (b - a)[:, None, :]
    r = np.linalg.norm(q[..., :2] - p[:, None, :2], axis=-1)
    return evaluate(r, np.broadcast_to(p[:, None, 2], r.shape), q[..., 2]).mean(axis=1)


def _near_point_values(p, segments: Segments, kernel: SoilKernel, j) -> np.ndarray:
    """(1/L_j) ∫_j G(p, x') ds' with the near terms in closed form and the remainder by Gauss."""
    a, b, L = segments.start[j], segments.end[j], segments.length[j]
    # the thin-wire offset applies only inside the metal; elsewhere the exact distance is used
    t = np.clip(np.einsum("ij,ij->i", p - a, b - a) / (L * L), 0.0, 1.0)
    inside = np.linalg.norm(p - (a + t[:, None] * (b - a)), axis=1) < segments.radius[j]
    offset = np.where(inside, segments.radius[j], 0.0)
    exact = near_term_sum(kernel, p[:, 2], a, b, lambda m, c, d: line_integral(p[m], c, d, offset[m]))
    return exact / L + _gauss_point_values(kernel.remainder, p, a, b)
