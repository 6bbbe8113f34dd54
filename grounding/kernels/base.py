"""The soil-kernel interface: the point-source Green's function of a horizontally layered earth.

A kernel gives G(x, x'), the potential at x (V) per ampere injected at x', in Ω. Assembly needs it
in two forms: a few *near terms*, point sources c / |x − x_img| whose image points are straight
mirror maps of the source (ζ = s·z' + t), integrated exactly over segments; and the smooth
*remainder* G − Σ near terms, evaluated by quadrature. Far apart, the whole G is evaluated at points.
"""

from __future__ import annotations

import functools
from abc import ABC, abstractmethod
from dataclasses import dataclass
from typing import Callable

import numpy as np

Radial = Callable[[np.ndarray], np.ndarray]

#: Depths closer than this are one depth class, m.
DEPTH_QUANTUM = 1e-9
#: Node spacing of the radial tables in u = ln(r + r_c).
TABLE_STEP = 0.0025
#: Above this many distinct (z, z') pairs, kernels that can sum their terms directly do so.
MAX_TABLE_PAIRS = 256
#: Radial tables reach this horizontal distance; beyond it G·√(r²+r_c²) is held constant, m.
TABLE_REACH = 1e5


def kept_per_kernel(method):
    """Memoise a kernel method (hashable arguments) on the kernel object itself, so that its tables live and die
    with the kernel. (functools.lru_cache on a method keeps every object it was called on alive for good: a study
    left each soil's tables behind, 181 MB per soil on the benchmark yard, and a sweep or refinement one set per
    soil it tried.) Two threads asking at once may both compute a value; they get equal ones."""
    name = "_kept_" + method.__name__

    @functools.wraps(method)
    def wrapper(self, *args):
        kept = self.__dict__.get(name)
        if kept is None:
            kept = self.__dict__.setdefault(name, {})
        try:
            return kept[args]
        except KeyError:
            return kept.setdefault(args, method(self, *args))
    return wrapper


@dataclass(frozen=True)
class ImageTerms:
    """Point-source terms of a Green's function: G = Σ_k c_k / √(r² + (z − (s_k z' + t_k))²).

    Attributes
    ----------
    coefficient : ndarray, shape (K,)
        c_k, Ω·m (ρ/(4π) times the image strength).
    sign : ndarray, shape (K,)
        s_k, +1 for a shifted source, −1 for a mirrored one.
    shift : ndarray, shape (K,)
        t_k, m.
    """

    coefficient: np.ndarray
    sign: np.ndarray
    shift: np.ndarray

    def __len__(self) -> int:
        return len(self.coefficient)

    def evaluate(self, r: np.ndarray, z: np.ndarray, zp: np.ndarray) -> np.ndarray:
        """Σ_k c_k / distance_k at point pairs (horizontal distance r, depths z, z'), Ω."""
        out = np.zeros(np.broadcast_shapes(np.shape(r), np.shape(z), np.shape(zp)))
        r2 = np.square(r)
        for c, s, t in zip(self.coefficient, self.sign, self.shift):
            out += c / np.sqrt(r2 + np.square(z - (s * zp + t)))
        return out


class RadialTable:
    """G(r) at fixed depths, tabulated on u = ln(r + r_c) and interpolated linearly.

    Nodes are spaced about r_c·Δ near r = 0 and logarithmically far away. The stored quantity is
    G·(r + w), w the vertical offset of the nearest source term (the direct term's |z − z'|, or the
    nearest image's offset for a remainder), which stays bounded and smooth both where G ~ 1/r and at
    r → 0, so that linear interpolation has a relative error below 4e-6 (seen: 3e-6). With w = 0 the table starts
    at ``r_min`` > 0. Evaluation costs one logarithm and two gathers per point: it runs over every far
    pair of the matrix and of the surface map.
    """

    def __init__(self, exact: Radial, r_c: float, r_min: float = 0.0, reach: float = TABLE_REACH,
                 step: float = TABLE_STEP, weight_scale: float | None = None):
        self.r_c = float(r_c)
        self.w = float(r_c if weight_scale is None else weight_scale)
        self.inv_step = 1.0 / step
        self.u0 = float(np.log(r_min + r_c))
        u = np.arange(self.u0, np.log(reach + r_c) + step, step)
        r = np.maximum(np.exp(u) - r_c, r_min)
        g = exact(r) * (r + self.w)
        self.g = g
        self.dg = np.append(np.diff(g), 0.0)
        self.last = float(len(u) - 1)

    def __call__(self, r: np.ndarray) -> np.ndarray:
        r = np.asarray(r, float)
        t = r + self.r_c
        np.log(t, out=t)
        t -= self.u0
        t *= self.inv_step
        np.clip(t, 0.0, self.last, out=t)
        k = t.astype(np.intp)
        t -= k                                   # fraction within the interval
        t *= self.dg[k]
        t += self.g[k]
        t /= r + self.w
        return t


class SoilKernel(ABC):
    """Green's function of a horizontally layered earth, behind one interface.

    Subclasses give the near terms per (observation layer, source layer) and the full and remainder
    functions at fixed depths; this base class groups arbitrary point pairs by depth.
    """

    #: Resistivities top to bottom, Ω·m.
    resistivities: tuple[float, ...]
    #: Interface depths, m.
    interfaces: tuple[float, ...]

    def __getstate__(self) -> dict:
        """The kernel without its memoised tables (closures, not picklable: another process makes its own)."""
        return {k: v for k, v in self.__dict__.items() if not k.startswith("_kept_")}

    def describe(self) -> dict:
        """What the kernel is, for the results' diagnostics."""
        return {"kind": type(self).__name__, "resistivities_ohm_m": list(self.resistivities),
                "interfaces_m": list(self.interfaces)}

    def layer_of(self, z: np.ndarray) -> np.ndarray:
        """Index of the layer holding each depth z (m); 0 is the top layer."""
        return np.searchsorted(np.asarray(self.interfaces), np.asarray(z), side="right")

    @abstractmethod
    def near_terms(self, obs_layer: int, src_layer: int) -> ImageTerms:
        """Image terms integrated exactly over segments (the direct term and the nearest images)."""

    @abstractmethod
    def radial(self, z: float, zp: float) -> Radial:
        """Full G(r) for observation depth z and source depth z' (m), as a function of r (m)."""

    @abstractmethod
    def remainder_radial(self, z: float, zp: float) -> Radial | None:
        """G(r) minus the near terms at fixed depths, or None when the near terms are all of G."""

    def potential(self, r: np.ndarray, z: np.ndarray, zp: np.ndarray) -> np.ndarray:
        """Full G at arbitrary point pairs (r, z, z' in m, broadcast), Ω.

        Pairs are grouped by depth and evaluated with the radial tables; when the depths take so many
        values that tables per pair of depths would cost more than they save, kernels that can sum
        their terms directly do so (see ``direct_potential``)."""
        z, zp = np.asarray(z, float), np.asarray(zp, float)
        levels = _levels(z.ravel()), _levels(zp.ravel())
        if self._go_direct(r, z, zp, levels):
            direct = self.direct_potential(r, z, zp)
            if direct is not None:
                return direct
        return self._by_depth(self.radial, r, z, zp, levels)

    def remainder(self, r: np.ndarray, z: np.ndarray, zp: np.ndarray) -> np.ndarray:
        """G minus the near terms at arbitrary point pairs, Ω (zeros when there is no remainder)."""
        z, zp = np.asarray(z, float), np.asarray(zp, float)
        levels = _levels(z.ravel()), _levels(zp.ravel())
        if self._go_direct(r, z, zp, levels):
            direct = self.direct_remainder(r, z, zp)
            if direct is not None:
                return direct
        return self._by_depth(self.remainder_radial, r, z, zp, levels)

    def direct_potential(self, r, z, zp) -> np.ndarray | None:
        """Full G summed term by term at arbitrary point pairs, or None when the kernel has no such sum."""
        return None

    def direct_remainder(self, r, z, zp) -> np.ndarray | None:
        """Remainder summed term by term at arbitrary point pairs, or None."""
        return None

    def prefer_direct(self, depth_pairs: int, elements: int) -> bool:
        """Whether summing terms directly beats grouping ``elements`` point pairs by their
        ``depth_pairs`` distinct (z, z') pairs and using a table for each."""
        return depth_pairs > MAX_TABLE_PAIRS

    def _go_direct(self, r, z, zp, levels=None) -> bool:
        z, zp = np.asarray(z), np.asarray(zp)
        if z.size <= 1 and zp.size <= 1:
            return False
        (lz, _), (lp, _) = levels or (_levels(np.ravel(z)), _levels(np.ravel(zp)))
        pairs = len(lz) * len(lp)
        size = int(np.prod(np.broadcast_shapes(np.shape(r), z.shape, zp.shape)))
        return self.prefer_direct(pairs, size)

    def sum_by_layers(self, terms_of, r, z, zp) -> np.ndarray:
        """Σ of ``terms_of(obs_layer, src_layer)`` image terms at arbitrary point pairs, Ω."""
        r, z, zp = np.broadcast_arrays(np.asarray(r, float), np.asarray(z, float), np.asarray(zp, float))
        out = np.zeros(r.shape)
        lo, ls = self.layer_of(z), self.layer_of(zp)
        n = len(self.resistivities)
        for a in range(n):
            ma = lo == a
            if not ma.any():
                continue
            for b in range(n):
                m = ma & (ls == b)
                if m.any():
                    out[m] = terms_of(a, b).evaluate(r[m], z[m], zp[m])
        return out

    @staticmethod
    def _by_depth(factory, r, z, zp, levels=None) -> np.ndarray:
        z, zp = np.asarray(z, float), np.asarray(zp, float)
        # levels of the arrays as given (before broadcasting: few values), unless the caller has them
        (lz, iz), (lp, ip) = levels or (_levels(z.ravel()), _levels(zp.ravel()))
        if len(lz) == 1 and len(lp) == 1:            # one depth pair: no grouping, no broadcast copies
            shape = np.broadcast_shapes(np.shape(r), z.shape, zp.shape)
            f = factory(lz[0] * DEPTH_QUANTUM, lp[0] * DEPTH_QUANTUM)
            if f is None:
                return np.zeros(shape)
            return f(np.array(np.broadcast_to(np.asarray(r, float), shape)))      # a copy: tables work in place
        shape = np.broadcast_shapes(np.shape(r), z.shape, zp.shape)
        out = np.zeros(shape)
        if out.size == 0:
            return out
        flat_r = np.broadcast_to(np.asarray(r, float), shape).ravel()
        flat = out.ravel()
        # the code of each pair's depth pair, from the level indices broadcast (not the depths: no second search)
        code = (np.broadcast_to(iz.reshape(z.shape), shape) * len(lp) + np.broadcast_to(ip.reshape(zp.shape), shape)).ravel()
        n_codes = len(lz) * len(lp)
        order = np.argsort(code.astype(np.uint16) if n_codes < 2 ** 16 else code, kind="stable")
        bounds = np.searchsorted(code[order], np.arange(n_codes + 1))
        for c in np.flatnonzero(np.diff(bounds)):
            f = factory(lz[c // len(lp)] * DEPTH_QUANTUM, lp[c % len(lp)] * DEPTH_QUANTUM)
            if f is None:
                continue
            idx = order[bounds[c]:bounds[c + 1]]
            flat[idx] = f(flat_r[idx])
        return flat.reshape(shape)


def _levels(z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distinct quantised depths and the index of each depth among them, avoiding a full sort
    when the depths take few values (the usual case: they come from a few burial depths)."""
    q = np.round(z / DEPTH_QUANTUM).astype(np.int64)
    if q.size and q.min() == q.max():
        return q[:1], np.zeros(q.size, dtype=np.int64)
    sample = np.unique(q[:: max(1, q.size // 4096)])
    idx = np.minimum(np.searchsorted(sample, q), len(sample) - 1)
    missed = sample[idx] != q
    if not missed.any():
        return sample, idx
    # depths the sample missed (rod points: many depths, few pairs each) are added; no full sort of q
    levels = np.union1d(sample, q[missed])
    return levels, np.searchsorted(levels, q)
