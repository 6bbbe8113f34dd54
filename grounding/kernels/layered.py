"""N-layer soil: the point-source Green's function from the layered-earth Hankel transform.

For a source at depth z' in layer s, the potential in every layer is written in the Hankel domain as
c_s [S + a_m e^{−λ(z − top_m)} + b_m e^{−λ(bottom_m − z)}], S = e^{−λ|z − z'|} in the source layer,
c_s = ρ_s/(4π); the coefficients follow, wavenumber by wavenumber, from no current through the
surface, and continuity of potential and of normal current density at every interface (a small
linear system, solved batched over λ; every exponential is ≤ 1, so it stays well conditioned).

The near terms are the direct term, the surface image (top layer), the first reflection in each
interface bounding the source layer (factor K = (ρ_next − ρ_s)/(ρ_next + ρ_s)), and for an adjacent
layer the transmitted source and its surface image (factor 1 + K). Their Hankel-domain forms are
subtracted, and the smooth remainder is transformed with the 201-point digital linear filter of Key
(2012, from libdlf) on logarithmic r nodes that share one wavenumber grid, so that the coefficients
are solved once per source depth; at small r, where the filter loses digits, the J0 integral is summed
directly on the same grid. The results are tabulated in r.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
import scipy.sparse as sp
from scipy.interpolate import CubicSpline
from scipy.special import j0

from .base import DEPTH_QUANTUM, TABLE_REACH, ImageTerms, Radial, RadialTable, SoilKernel, _levels, kept_per_kernel

#: Sub-grids per filter spacing on the logarithmic r nodes (lagged convolution).
SUBGRIDS = 4
#: Gauss–Legendre order of the small-r quadrature.
QUAD_ORDER = 384
#: Below this relative size the remainder's spectrum is taken as zero.
SPECTRUM_FLOOR = 1e-13
#: Depth-node spacing of the remainder when depths take very many values, m: the thinnest layer / 30,
#: within 1 and 10 times this.
DEPTH_BIN = 0.01
#: First logarithmic table node, m.
NODE_START = 1e-3
#: λ·r below which J0 is resolved by the ln λ grid (10 points per period at the limit).
SMOOTH_J0 = 20.0


@lru_cache(maxsize=1)
def _filter():
    import libdlf

    base, w, _ = libdlf.hankel.key_201_2012()
    return np.log(np.asarray(base, float)), np.asarray(w, float)


class LayeredSoil(SoilKernel):
    """Green's function of an N-layer earth.

    Parameters
    ----------
    resistivities : sequence of float
        Layer resistivities top to bottom, Ω·m.
    thicknesses : sequence of float
        Thicknesses of all layers but the last, m.
    """

    def __init__(self, resistivities, thicknesses):
        self.rho = np.asarray(resistivities, float)
        self.t = np.asarray(thicknesses, float)
        self.resistivities = tuple(self.rho)
        self.interfaces = tuple(np.cumsum(self.t))
        self.top = np.concatenate([[0.0], self.interfaces])                 # top of each layer
        self.bottom = np.concatenate([self.interfaces, [np.inf]])

    # ---- near terms -----------------------------------------------------------------------------
    def _k(self, a: int, b: int) -> float:
        """Reflection factor seen from layer a towards layer b."""
        return (self.rho[b] - self.rho[a]) / (self.rho[b] + self.rho[a])

    @kept_per_kernel
    def near_terms(self, obs_layer: int, src_layer: int) -> ImageTerms:
        n = len(self.rho)
        c = self.rho[src_layer] / (4 * np.pi)
        coef, sign, shift = [], [], []
        if obs_layer == src_layer:
            i = src_layer
            coef.append(c); sign.append(1.0); shift.append(0.0)
            if i == 0:
                coef.append(c); sign.append(-1.0); shift.append(0.0)
            else:
                coef.append(c * self._k(i, i - 1)); sign.append(-1.0); shift.append(2 * self.top[i])
            if i < n - 1:
                coef.append(c * self._k(i, i + 1)); sign.append(-1.0); shift.append(2 * self.bottom[i])
        elif abs(obs_layer - src_layer) == 1:
            w = c * (1 + self._k(src_layer, obs_layer))
            coef.append(w); sign.append(1.0); shift.append(0.0)
            if min(obs_layer, src_layer) == 0:
                coef.append(w); sign.append(-1.0); shift.append(0.0)
        return ImageTerms(np.array(coef), np.array(sign), np.array(shift))

    # ---- Hankel-domain solution -------------------------------------------------------------------
    def coefficients(self, lam: np.ndarray, zp: float) -> np.ndarray:
        """Homogeneous-solution coefficients (a_0, b_0, a_1, b_1, …, a_{N−1}) per λ, shape (L, 2N − 1)."""
        n = len(self.rho)
        s = int(self.layer_of(zp))
        L = len(lam)
        k = 2 * n - 1
        A = np.zeros((L, k, k))
        rhs = np.zeros((L, k))
        e = np.exp(-lam[:, None] * self.t[None, :])                          # (L, N−1)

        def ia(m):
            return 2 * m

        def ib(m):
            return 2 * m + 1

        # surface, ∂V/∂z = 0 (divided by λ)
        A[:, 0, ia(0)] = -1.0
        if n > 1:
            A[:, 0, ib(0)] = e[:, 0]
        if s == 0:
            rhs[:, 0] = -np.exp(-lam * zp)
        for m in range(n - 1):
            d = self.interfaces[m]
            rc, rf = 1 + 2 * m, 2 + 2 * m
            A[:, rc, ia(m)] = e[:, m]
            A[:, rc, ib(m)] = 1.0
            A[:, rc, ia(m + 1)] = -1.0
            A[:, rf, ia(m)] = -e[:, m] / self.rho[m]
            A[:, rf, ib(m)] = 1.0 / self.rho[m]
            A[:, rf, ia(m + 1)] = 1.0 / self.rho[m + 1]
            if m + 1 < n - 1:
                A[:, rc, ib(m + 1)] = -e[:, m + 1]
                A[:, rf, ib(m + 1)] = -e[:, m + 1] / self.rho[m + 1]
            for layer, side in ((m, 1.0), (m + 1, -1.0)):
                if layer == s:
                    S = np.exp(-lam * abs(d - zp))
                    dS = -np.sign(d - zp) * S                                 # S'/λ
                    rhs[:, rc] -= side * S
                    rhs[:, rf] -= side * dS / self.rho[layer]
        return np.linalg.solve(A, rhs[..., None])[..., 0]

    def remainder_spectrum(self, lam: np.ndarray, z: float, zp: float) -> np.ndarray:
        """Hankel-domain remainder (Ω·m): the whole kernel minus the near terms, at observation depth z."""
        return self._spectrum_from(self.coefficients(lam, zp), lam, z, zp)

    def _spectrum_from(self, co: np.ndarray, lam: np.ndarray, z: float, zp: float) -> np.ndarray:
        m = int(self.layer_of(z))
        s = int(self.layer_of(zp))
        n = len(self.rho)
        g = co[:, 2 * m] * np.exp(-lam * (z - self.top[m]))
        if m < n - 1:
            g = g + co[:, 2 * m + 1] * np.exp(-lam * (self.bottom[m] - z))
        g = g * self.rho[s] / (4 * np.pi)
        terms = self.near_terms(m, s)
        for c, sg, t in zip(terms.coefficient, terms.sign, terms.shift):
            if m == s and sg == 1.0 and t == 0.0:
                continue                                                      # the direct term: S is not in g
            g = g - c * np.exp(-lam * abs(z - (sg * zp + t)))
        return g

    def remainder_exact(self, r: np.ndarray, z: float, zp: float) -> np.ndarray:
        """The remainder at horizontal distances r (m) by Gauss–Legendre quadrature of the J0 integral
        up to where the spectrum has decayed, Ω. Slow for large r; the reference for the tables."""
        lam = np.geomspace(1e-6, 1e8, 600)
        g = np.abs(self.remainder_spectrum(lam, z, zp))
        above = np.flatnonzero(g > SPECTRUM_FLOOR * max(g.max(), 1e-300))
        lam_max = float(lam[min(above[-1] + 1, len(lam) - 1)]) if len(above) else 1.0
        x, w = np.polynomial.legendre.leggauss(QUAD_ORDER)
        nodes = 0.5 * lam_max * (x + 1)
        spec = self.remainder_spectrum(nodes, z, zp) * 0.5 * lam_max * w
        return j0(np.outer(np.atleast_1d(r), nodes)) @ spec

    def _grid(self):
        """The shared wavenumber grid of the tables and the DLF index of every (node, filter point)."""
        if not hasattr(self, "_grid_cache"):
            ln_b, wts = _filter()
            delta = (ln_b[1] - ln_b[0]) / SUBGRIDS
            k_nodes = int(np.ceil(np.log(TABLE_REACH / NODE_START) / delta)) + 1
            ln_r = np.log(NODE_START) + delta * np.arange(k_nodes)
            i_of = (np.arange(len(ln_b)) * SUBGRIDS)[None, :] - np.arange(k_nodes)[:, None] + (k_nodes - 1)
            ln_lam = ln_b[0] - np.log(NODE_START) + delta * (np.arange(i_of.max() + 1) - (k_nodes - 1))
            self._grid_cache = (np.exp(ln_r), np.exp(ln_lam), i_of, wts, delta)
        return self._grid_cache

    def _filter_matrix(self) -> sp.csr_matrix:
        """The digital filter on the logarithmic r nodes as a sparse matrix over the wavenumber grid: row n holds
        the filter weights at the λ indices ``i_of[n]``; one product per table instead of a gather of every node's
        filter points."""
        if not hasattr(self, "_filter_cache"):
            r_log, lam, i_of, wts, _ = self._grid()
            rows = np.repeat(np.arange(len(r_log)), i_of.shape[1])
            self._filter_cache = sp.csr_matrix((np.tile(wts, len(r_log)), (rows, i_of.ravel())),
                                               shape=(len(r_log), len(lam)))
        return self._filter_cache

    @kept_per_kernel
    def _filter_rows(self, first: int) -> sp.csr_matrix:
        """The filter matrix's rows from ``first`` on (the logarithmic nodes beyond a table's r_switch): a few dozen
        distinct starts per kernel, so sliced once each rather than once per table (the slice cost three times the
        product)."""
        return self._filter_matrix()[first:]

    @kept_per_kernel
    def _grid_coefficients(self, zp: float) -> np.ndarray:
        return self.coefficients(self._grid()[1], zp)

    @kept_per_kernel
    def _small_r_block(self, first: int, last: int):
        """(r_switch, band, r, J0(λ r)) of the trapezoid sum for small r, for a spectrum living on the λ indices
        first…last: the same for every depth pair whose spectrum lives there (a large yard's thousands of tables
        share a few dozen), so computed once per kernel."""
        lam = self._grid()[1]
        lam_max = lam[min(last + 1, len(lam) - 1)]
        r_switch = float(np.clip(SMOOTH_J0 / lam_max, NODE_START, 1e3))
        band = slice(max(first - 1, 0), last + 2)
        r_small = np.linspace(0.0, r_switch, 33)
        return r_switch, band, r_small, j0(np.outer(r_small, lam[band]))

    @kept_per_kernel
    def remainder_radial(self, z: float, zp: float) -> Radial | None:
        r_log, lam, i_of, wts, delta = self._grid()
        spec = self._spectrum_from(self._grid_coefficients(zp), lam, z, zp)
        # where the spectrum lives: J0(λr) is smooth there for r below r_switch, and the J0 integral is
        # summed by the trapezoid rule in ln λ; beyond r_switch the digital filter on logarithmic nodes
        # sharing the λ grid (lagged convolution) takes over. The filter alone loses digits for r much
        # below the spectrum's decay length (0.5 % at 1 mm seen), the trapezoid sum for large r.
        mag = np.abs(spec)
        live = np.flatnonzero(mag > SPECTRUM_FLOOR * max(mag.max(), 1e-300))
        if len(live) == 0:
            return None
        r_switch, band, r_small, bessel = self._small_r_block(int(live[0]), int(live[-1]))
        g_small = bessel @ (spec[band] * lam[band]) * delta
        first_log = int(np.searchsorted(r_log, r_switch, side="right"))             # r_log > r_switch
        keep = slice(first_log, None)
        g_log = self._filter_rows(first_log) @ spec / r_log[keep]
        r = np.concatenate([r_small, r_log[keep]])
        g = np.concatenate([g_small, g_log])
        r_s = r_switch                                   # the scale on which the remainder varies
        weight = np.sqrt(r * r + r_s * r_s)
        spline = CubicSpline(np.arcsinh(r / r_s), g * weight)

        def exact(q):
            return spline(np.arcsinh(np.minimum(q, r[-1]) / r_s)) / np.sqrt(q * q + r_s * r_s)

        return RadialTable(exact, r_s)

    @kept_per_kernel
    def radial(self, z: float, zp: float) -> Radial:
        near = self.near_terms(int(self.layer_of(z)), int(self.layer_of(zp)))
        rem = self.remainder_radial(z, zp)
        dz = abs(z - zp)
        r_c = max(dz, 1e-3)
        r_min = 1e-4 if dz < 1e-6 else 0.0
        return RadialTable(lambda r: near.evaluate(r, z, zp) + rem(r), r_c, r_min, weight_scale=dz)

    def _go_direct(self, r, z, zp, levels=None) -> bool:
        """Interpolate between depth nodes only when that needs fewer tables than the exact depths."""
        z, zp = np.asarray(z, float), np.asarray(zp, float)
        if z.size <= 1 and zp.size <= 1:
            return False
        (lz, _), (lp, _) = levels or (_levels(np.ravel(z)), _levels(np.ravel(zp)))
        lz, lp = lz * DEPTH_QUANTUM, lp * DEPTH_QUANTUM
        exact = len(lz) * len(lp)
        if exact <= 16:
            return False
        nz = len(np.unique(np.concatenate(self._depth_nodes(lz)[:2])))
        npp = len(np.unique(np.concatenate(self._depth_nodes(lp)[:2])))
        return nz * npp < exact

    def direct_potential(self, r, z, zp):
        """Near terms at the exact depths plus the remainder interpolated between depth nodes."""
        near = self.sum_by_layers(self.near_terms, r, z, zp)
        return near + self.direct_remainder(r, z, zp)

    def direct_remainder(self, r, z, zp):
        """The remainder interpolated bilinearly between depth nodes a thirtieth of the thinnest layer
        apart (1–10 cm, kept inside each point's layer), so that many distinct depths share a few tables;
        the remainder is smooth in depth within a layer. Seen: pointwise error 7e-5 of G, Rg within
        1.4e-4 of the image series for sloping conductors in a 1 m top layer."""
        # depth nodes of the arrays as given; _by_depth broadcasts them with r (few distinct depths to group)
        r, z, zp = np.asarray(r, float), np.asarray(z, float), np.asarray(zp, float)
        (z0, z1, fz), (p0, p1, fp) = self._depth_nodes(z), self._depth_nodes(zp)
        rem = self._by_depth
        f = self.remainder_radial
        return ((1 - fz) * (1 - fp) * rem(f, r, z0, p0) + fz * (1 - fp) * rem(f, r, z1, p0)
                + (1 - fz) * fp * rem(f, r, z0, p1) + fz * fp * rem(f, r, z1, p1))

    def _depth_nodes(self, z):
        """Depth nodes below and above each depth within its layer, and the interpolation weight."""
        step = float(np.clip(self.t.min() / 30, DEPTH_BIN, 10 * DEPTH_BIN))
        layer = self.layer_of(z)
        lo = self.top[layer] + 1e-9
        hi = np.minimum(self.bottom[layer], self.top[layer] + 1e6) - 1e-9
        k = np.floor(z / step)
        z0 = np.clip(k * step, lo, hi)
        z1 = np.clip((k + 1) * step, lo, hi)
        width = z1 - z0
        w = np.where(width > 0, (z - z0) / np.where(width > 0, width, 1.0), 0.0)
        return z0, z1, np.clip(w, 0.0, 1.0)

    def describe(self) -> dict:
        return {**super().describe(), "method": "Hankel transform, Key (2012) 201-point filter, tabulated"}
