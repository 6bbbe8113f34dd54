"""Uniform soil under insulating air: the source and its image mirrored in the surface."""

from __future__ import annotations

import numpy as np

from .base import ImageTerms, Radial, SoilKernel, kept_per_kernel


class UniformSoil(SoilKernel):
    """G = ρ/(4π) (1/R + 1/R'), R' the distance to the image mirrored in the ground surface.

    Parameters
    ----------
    resistivity : float
        ρ, Ω·m.
    """

    def __init__(self, resistivity: float):
        self.resistivity = float(resistivity)
        self.resistivities = (self.resistivity,)
        self.interfaces = ()
        c = self.resistivity / (4 * np.pi)
        self._terms = ImageTerms(np.array([c, c]), np.array([1.0, -1.0]), np.array([0.0, 0.0]))

    def near_terms(self, obs_layer: int, src_layer: int) -> ImageTerms:
        return self._terms

    @kept_per_kernel
    def radial(self, z: float, zp: float) -> Radial:
        c = self.resistivity / (4 * np.pi)
        dm2, dp2 = (z - zp) ** 2, (z + zp) ** 2

        def g(r):
            # in-place arithmetic: this runs over every far pair of the matrix
            r2 = np.square(r)
            direct = r2 + dm2
            np.sqrt(direct, out=direct)
            np.divide(c, direct, out=direct)
            r2 += dp2
            np.sqrt(r2, out=r2)
            np.divide(c, r2, out=r2)
            direct += r2
            return direct

        return g

    def remainder_radial(self, z: float, zp: float) -> Radial | None:
        return None

    def prefer_direct(self, depth_pairs: int, elements: int) -> bool:
        return depth_pairs > 16                     # two terms: direct is always cheap

    def direct_potential(self, r, z, zp):
        return self._terms.evaluate(r, z, zp)

    def direct_remainder(self, r, z, zp):
        return np.zeros(np.broadcast_shapes(np.shape(r), np.shape(z), np.shape(zp)))
