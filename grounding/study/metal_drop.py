"""How far the metal's potential drops along the conductors: from the coupled solution, or screened on a coarse discretisation for an equipotential study."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from ..case.model import Case
from ..errors import GroundingError
from ..geometry.network import metal_network
from ..geometry.segments import Segments, segment
from ..kernels import make_kernel
from ..operators.assembly import AssemblyOptions
from ..operators.mutual_resistance import dense_operator
from ..solve.equipotential import Solution
from ..solve.network import MetalState
from ..solve.run import injection_nodes, network_solve
from .result import MetalDrop

#: The potential-drop screening of an equipotential study runs on at most this many segments (the
#: discretisation is coarsened until it fits); it is an estimate, not a result.
DROP_ESTIMATE_SEGMENTS = 400
#: A drop of the metal potential beyond this share of the GPR makes the equipotential model questionable.
DROP_WARNING = 0.02


def metal_drop(case: Case, segments: Segments, solution: Solution) -> MetalDrop:
    """The metal potential's spread: from the coupled solution, or screened for an equipotential study."""
    if solution.metal is not None:
        return _drop_of(solution.metal, solution.metal.solution.injection_nodes[0], False,
                        "from the coupled metal–soil solution")
    return estimate_metal_drop(case, segments)


def _drop_of(metal: MetalState, feed_node: int, estimated: bool, note: str) -> MetalDrop:
    """Largest |V_node − V_feed| / |V_feed| and least |V_node| / |V_feed| over the energised metal."""
    v = metal.node_potential[metal.network.group == 0]
    v0 = metal.node_potential[feed_node]
    return MetalDrop(float(np.max(np.abs(v - v0)) / abs(v0)), float(np.min(np.abs(v)) / abs(v0)),
                     tuple(float(x) for x in metal.network.nodes[feed_node]), estimated, note)


def estimate_metal_drop(case: Case, segments: Segments | None = None) -> MetalDrop:
    """Screening of an equipotential study: the coupled solve on a coarse discretisation (at most
    DROP_ESTIMATE_SEGMENTS segments), fed at the case's injection point or at the energised metal's node
    nearest its centroid. ``segments``: the case's own segmentation, used as it is when small enough, else to
    start the coarsening near the right length."""
    h = case.discretization.max_segment
    coarse = case
    if segments is None or len(segments) > DROP_ESTIMATE_SEGMENTS:
        if segments is not None:
            h *= 1.1 * len(segments) / DROP_ESTIMATE_SEGMENTS
        for _ in range(10):
            coarse = replace(case, discretization=replace(case.discretization, max_segment=h))
            segments = segment(coarse)
            if len(segments) <= DROP_ESTIMATE_SEGMENTS:
                break
            h *= 2
        else:
            return MetalDrop(None, None, None, True, f"not estimated: the layout needs more than "
                                                     f"{DROP_ESTIMATE_SEGMENTS} segments even when coarsened")
    kernel = make_kernel(coarse.soil, h)
    R = dense_operator(segments, kernel, AssemblyOptions()).matrix
    network = metal_network(segments)
    if case.fault.injection:
        injection = injection_nodes(coarse, network)
        where = "the case's fault.injection"
    else:
        main = network.group == 0
        centre = network.nodes[main].mean(axis=0)
        injection = [(network.nearest_node(centre)[0], 1.0)]
        where = "the metal nearest the centroid (no fault.injection given)"
    try:
        metal = network_solve(coarse, segments, R, injection)
    except GroundingError as exc:
        return MetalDrop(None, None, None, True, f"not estimated: {exc}")
    return _drop_of(metal, injection[0][0], True,
                    f"screening estimate: {len(segments)} segments of up to {h:g} m, current entering at {where}")
