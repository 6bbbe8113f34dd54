"""Two-layer soil: the image series of a point source (Sunde 1949; Tagg 1964), truncated by tolerance.

Top layer ρ1 of thickness h over ρ2, reflection factor K = (ρ2 − ρ1)/(ρ2 + ρ1). With z, z' the
depths of observation point and source and r their horizontal distance (c1 = ρ1/(4π)):

- both in the top layer: G = c1 Σ_{n=−∞..∞} K^|n| [1/√(r² + (z − z' − 2nh)²) + 1/√(r² + (z + z' − 2nh)²)]
- one in each layer: G = c1 (1 + K) Σ_{n≥0} K^n [1/√(r² + (z_b − z_t + 2nh)²) + 1/√(r² + (z_b + z_t + 2nh)²)]
- both in the bottom layer: G = c2 [1/R − K/√(r² + (z + z' − 2h)²) + (1 − K²) Σ_{n≥0} K^n/√(r² + (z + z' + 2nh)²)]

The series stops at the order N where |K|^N / (1 − |K|) falls below the tolerance, which bounds the
relative size of the neglected tail.
"""

from __future__ import annotations

import math

import numpy as np

from .base import ImageTerms, Radial, RadialTable, SoilKernel, kept_per_kernel

#: Nodes of a radial table (about ln(reach / r_c) / step), for the table-or-direct choice.
TABLE_NODES = 5000


def series_order(k: float, tolerance: float) -> int:
    """Number of image orders N for which the neglected tail is below ``tolerance`` (relative)."""
    if abs(k) < 1e-15:
        return 0
    return max(1, math.ceil(math.log(tolerance * (1 - abs(k))) / math.log(abs(k))))


class TwoLayerSoil(SoilKernel):
    """Green's function of two-layer soil by images.

    Parameters
    ----------
    rho1, rho2 : float
        Top and bottom resistivities, Ω·m.
    thickness : float
        Top-layer thickness h, m.
    tolerance : float
        Relative truncation tolerance of the image series.
    near_order : int
        Image orders up to this are integrated exactly over segments; the rest form the remainder.
    """

    def __init__(self, rho1: float, rho2: float, thickness: float, tolerance: float = 1e-6,
                 near_order: int = 1):
        self.rho1, self.rho2, self.h = float(rho1), float(rho2), float(thickness)
        self.resistivities = (self.rho1, self.rho2)
        self.interfaces = (self.h,)
        self.k = (self.rho2 - self.rho1) / (self.rho2 + self.rho1)
        self.tolerance = tolerance
        self.order = series_order(self.k, tolerance)
        self.near_order = min(near_order, self.order)
        self._all = {pair: self._terms(*pair) for pair in ((0, 0), (0, 1), (1, 0), (1, 1))}

    def describe(self) -> dict:
        """Kernel facts plus the image series' truncation."""
        return {**super().describe(), "reflection_factor": self.k, "series_tolerance": self.tolerance,
                "series_orders": self.order, "exact_image_orders": self.near_order}

    @property
    def term_count(self) -> int:
        """Number of point-source terms in the top–top series."""
        return len(self._all[(0, 0)][0])

    def _terms(self, obs: int, src: int) -> tuple[ImageTerms, np.ndarray]:
        k, h, N = self.k, self.h, self.order
        c1, c2 = self.rho1 / (4 * np.pi), self.rho2 / (4 * np.pi)
        coef, sign, shift, order = [], [], [], []

        def add(c, s, t, n):
            coef.append(c); sign.append(s); shift.append(t); order.append(n)

        if obs == 0 and src == 0:
            for n in range(-N, N + 1):
                w = c1 * k ** abs(n)
                add(w, 1.0, 2 * n * h, abs(n))
                add(w, -1.0, 2 * n * h, abs(n))
        elif obs == 1 and src == 0:              # image depths ζ = z' − 2nh and −z' − 2nh
            for n in range(N + 1):
                w = c1 * (1 + k) * k ** n
                add(w, 1.0, -2 * n * h, n)
                add(w, -1.0, -2 * n * h, n)
        elif obs == 0 and src == 1:              # reciprocity: ζ = z' + 2nh and −z' − 2nh
            for n in range(N + 1):
                w = c1 * (1 + k) * k ** n
                add(w, 1.0, 2 * n * h, n)
                add(w, -1.0, -2 * n * h, n)
        else:
            add(c2, 1.0, 0.0, 0)
            add(-k * c2, -1.0, 2 * h, 0)
            for n in range(N + 1):
                add(c2 * (1 - k * k) * k ** n, -1.0, -2 * n * h, n)
        arr = np.array
        return ImageTerms(arr(coef), arr(sign), arr(shift)), arr(order)

    def _split(self, obs: int, src: int, near: bool) -> ImageTerms:
        terms, order = self._all[(obs, src)]
        m = order <= self.near_order if near else order > self.near_order
        return ImageTerms(terms.coefficient[m], terms.sign[m], terms.shift[m])

    @kept_per_kernel
    def near_terms(self, obs_layer: int, src_layer: int) -> ImageTerms:
        return self._split(obs_layer, src_layer, near=True)

    def prefer_direct(self, depth_pairs: int, elements: int) -> bool:
        # a table costs about its node count in term sums; the direct sum costs one per element
        return depth_pairs > 16 and depth_pairs * TABLE_NODES > elements

    def direct_potential(self, r, z, zp):
        return self.sum_by_layers(lambda a, b: self._all[(a, b)][0], r, z, zp)

    def direct_remainder(self, r, z, zp):
        return self.sum_by_layers(lambda a, b: self._far_terms(a, b), r, z, zp)

    @kept_per_kernel
    def _far_terms(self, obs: int, src: int) -> ImageTerms:
        return self._split(obs, src, near=False)

    def _layers(self, z: float, zp: float) -> tuple[int, int]:
        return int(z >= self.h), int(zp >= self.h)

    def series(self, r: np.ndarray, z: float, zp: float) -> np.ndarray:
        """Full image series at fixed depths (no table), Ω; the reference the tables are built from."""
        terms, _ = self._all[self._layers(z, zp)]
        return _sum_terms(terms, np.asarray(r, float), z, zp)

    @kept_per_kernel
    def radial(self, z: float, zp: float) -> Radial:
        terms, _ = self._all[self._layers(z, zp)]
        dz = abs(z - zp)
        r_c = max(dz, 0.05 * self.h, 1e-3)
        r_min = 1e-4 if dz < 1e-6 else 0.0
        return RadialTable(lambda r: _sum_terms(terms, r, z, zp), r_c, r_min, weight_scale=dz)

    @kept_per_kernel
    def remainder_radial(self, z: float, zp: float) -> Radial | None:
        far = self._split(*self._layers(z, zp), near=False)
        if len(far) == 0:
            return None
        return RadialTable(lambda r: _sum_terms(far, r, z, zp), self.h)


def _sum_terms(terms: ImageTerms, r: np.ndarray, z: float, zp: float) -> np.ndarray:
    """Σ_k c_k / √(r² + (z − ζ_k)²) for a vector r at fixed depths, vectorised over terms."""
    zeta = terms.sign * zp + terms.shift
    d2 = np.square(z - zeta)
    r2 = np.square(np.asarray(r, float))[..., None]
    return np.sum(terms.coefficient / np.sqrt(r2 + d2), axis=-1)
