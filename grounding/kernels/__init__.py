"""Soil kernels: the Green's function of uniform and layered earth behind one interface."""

from __future__ import annotations

import math
from functools import lru_cache

from ..case.model import Soil
from .base import ImageTerms, RadialTable, SoilKernel
from .layered import LayeredSoil
from .two_layer import TwoLayerSoil, series_order
from .uniform import UniformSoil

#: Relative truncation tolerance of image series.
SERIES_TOLERANCE = 1e-6
#: Above this many image orders (|K| near 1: rock under thin soil, or the reverse) the image series needs
#: memory and time out of all proportion; two layers then use the Hankel-transform kernel of N layers.
MAX_IMAGE_ORDERS = 1000
#: Images closer than this many segment lengths are integrated exactly over segments.
EXACT_IMAGE_REACH = 3.0


#: Kernels kept for re-use: the last two soils (a kernel holds its radial tables: 181 MB for the benchmark yard's
#: three-layer soil with its fence posts and pipe, a few MB for flat grids).
KEPT_KERNELS = 2


def make_kernel(soil: Soil, max_segment: float = 1.0, tolerance: float = SERIES_TOLERANCE) -> SoilKernel:
    """The kernel for a soil model: closed form for uniform soil, the image series for two layers (the
    Hankel transform when |K| is so near 1 that the series would need more than MAX_IMAGE_ORDERS orders),
    the tabulated Hankel transform for three or more.

    Parameters
    ----------
    soil : Soil
        Layers top to bottom.
    max_segment : float
        Longest segment, m; sets how many image orders are integrated exactly.
    tolerance : float
        Relative truncation tolerance of the image series.
    """
    layers = soil.layers
    if soil.is_uniform:
        return UniformSoil(layers[0].resistivity)
    if len(layers) == 2 and series_order(_reflection(layers), tolerance) <= MAX_IMAGE_ORDERS:
        h = layers[0].thickness
        near = max(1, math.ceil(EXACT_IMAGE_REACH * max_segment / (2 * h)))
        return _kept(TwoLayerSoil, layers[0].resistivity, layers[1].resistivity, h, tolerance, near)
    return _kept(LayeredSoil, tuple(l.resistivity for l in layers), tuple(l.thickness for l in layers[:-1]))


@lru_cache(maxsize=KEPT_KERNELS)
def _kept(kind, *parameters) -> SoilKernel:
    """One kernel object per soil (and image reach) for the last few soils: a kernel fills its radial tables as
    they are needed (the Hankel transforms of a layered soil cost about a second on a large yard), so the study's
    own solve, the error estimate's coarser one, the metal-drop screen and scenarios with the same soil share
    them. A kernel's results depend only on its parameters, so sharing it changes no number."""
    return kind(*parameters)


def _reflection(layers) -> float:
    """K = (ρ2 − ρ1)/(ρ2 + ρ1) of two layers."""
    return (layers[1].resistivity - layers[0].resistivity) / (layers[1].resistivity + layers[0].resistivity)


__all__ = ["ImageTerms", "LayeredSoil", "RadialTable", "SoilKernel", "TwoLayerSoil", "UniformSoil", "make_kernel"]
