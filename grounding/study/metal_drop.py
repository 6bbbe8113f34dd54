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

#: The potential-drop screening of an equipotential study is coarsened toward this many segments; it is an
#: estimate, not a result.
DROP_ESTIMATE_SEGMENTS = 400
#: A layout whose pieces between junctions cannot be coarsened to DROP_ESTIMATE_SEGMENTS is screened on its
#: coarsest discretisation up to this many segments: a real yard is then screened (the benchmark collector yard:
#: 928 segments, 2–3 s; the drop 0.58 % against 0.57 % at 1 345 segments), where at 400 every yard with more
#: than a few hundred conductor pieces went unscreened.
DROP_MAX_SEGMENTS = 1_000
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
        # the pieces between junctions are the fewest segments any max_segment gives: past the limit, no
        # coarsening reaches it (one segmentation instead of a search that cannot succeed)
        pieces = len(segment(replace(case, discretization=replace(case.discretization, max_segment=1e9))))
        if pieces > DROP_MAX_SEGMENTS:
            return MetalDrop(None, None, None, True, f"not estimated: the layout needs more than "
                                                     f"{DROP_MAX_SEGMENTS} segments even when coarsened "
                                                     f"({pieces:,} conductor pieces between junctions)")
        start, found = (None if segments is None else len(segments)), False
        # toward DROP_ESTIMATE_SEGMENTS; a layout with too many pieces for that, toward DROP_MAX_SEGMENTS (the
        # finest discretisation that fits: far coarser ones can make segments longer than their spacing)
        for limit in (DROP_ESTIMATE_SEGMENTS, DROP_MAX_SEGMENTS):
            h = case.discretization.max_segment * (1.1 * start / limit if start else 1.0)
            for _ in range(10):
                coarse = replace(case, discretization=replace(case.discretization, max_segment=h))
                segments = segment(coarse)
                if len(segments) <= limit:
                    found = True
                    break
                h *= 2
            if found:
                break
        if not found:
            return MetalDrop(None, None, None, True, f"not estimated: the layout needs more than "
                                                     f"{DROP_MAX_SEGMENTS} segments even when coarsened")
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
