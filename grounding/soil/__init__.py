"""Soil kernels: the Green's function of uniform and layered earth behind one interface."""

from __future__ import annotations

import math

from ..case import Soil
from .base import ImageTerms, RadialTable, SoilKernel
from .two_layer import TwoLayerSoil
from .uniform import UniformSoil

#: Relative truncation tolerance of image series.
SERIES_TOLERANCE = 1e-6
#: Images closer than this many segment lengths are integrated exactly over segments.
EXACT_IMAGE_REACH = 3.0


def make_kernel(soil: Soil, max_segment: float = 1.0, tolerance: float = SERIES_TOLERANCE) -> SoilKernel:
    """The kernel for a soil model.

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
    if len(layers) == 2:
        h = layers[0].thickness
        near = max(1, math.ceil(EXACT_IMAGE_REACH * max_segment / (2 * h)))
        return TwoLayerSoil(layers[0].resistivity, layers[1].resistivity, h, tolerance, near)
    raise NotImplementedError(f"{len(layers)}-layer soil is not supported by this version")


__all__ = ["ImageTerms", "RadialTable", "SoilKernel", "TwoLayerSoil", "UniformSoil", "make_kernel"]
