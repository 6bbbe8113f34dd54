"""One discretisation of a case segmented, assembled and solved: equipotential, or metal and soil coupled when the conductors' impedance is modelled."""

from __future__ import annotations

import time
from dataclasses import replace
from typing import Callable

import numpy as np

from ..case.model import Case
from ..errors import ModelTooLargeError
from ..geometry.network import MetalNetwork, metal_network
from ..geometry.segments import Segments, segment
from ..kernels import SoilKernel, make_kernel
from ..kernels.impedance import series_impedance
from ..operators.assembly import AssemblyOptions
from ..operators.inductance import CompressedInductance
from ..operators.mutual_resistance import compressed_operator, dense_operator
from .equipotential import Solution, solve_operator
from .network import MetalState, solve_network, solve_network_iterative
from .policy import check_model_size, solver_kind, solver_memory_bytes

Progress = Callable[[str, float], None]


def build_operator(case: Case, segments: Segments, kernel: SoilKernel, progress: Progress | None = None):
    """The mutual-resistance operator the case's solver policy chooses: dense, or compressed."""
    build = dense_operator if solver_kind(case, len(segments)) == "dense" else compressed_operator
    return build(segments, kernel, AssemblyOptions(), progress)


def solve_case(case: Case, progress: Progress | None = None):
    """Segment, assemble and solve one discretisation; returns (segments, kernel, solution, timings)."""
    segments = segment(case)
    check_model_size(case, segments)
    kernel = make_kernel(case.soil, case.discretization.max_segment)
    if case.electrodes.conductor_impedance:
        return _solve_with_impedance(case, segments, kernel, progress)
    t0 = time.perf_counter()
    kind = solver_kind(case, len(segments))
    try:
        operator = build_operator(case, segments, kernel, progress)
        t1 = time.perf_counter()
        solution = solve_operator(operator, segments.group, connections(case), progress)
    except MemoryError:
        need = solver_memory_bytes(kind, len(segments))
        raise ModelTooLargeError(
            f"{case.source}: the {kind} solve of {len(segments):,} segments ran out of memory (planned "
            f"{need / 2 ** 30:.1f} GiB); use a longer discretization.max_segment or a machine with more memory") from None
    t2 = time.perf_counter()
    solution = replace(solution, solver={**solution.solver, "operator_mb": round(operator.nbytes / 1e6, 1)})
    return segments, kernel, solution, {"assemble_s": t1 - t0, "solve_s": t2 - t1}


def injection_nodes(case: Case, network: MetalNetwork) -> list[tuple[int, float]]:
    """Node and share of each injection point (the geometry put a node on each)."""
    return [(network.nearest_node(inj.point)[0], inj.share) for inj in case.fault.injection]


def network_solve(case: Case, segments: Segments, R: np.ndarray, injection=None) -> MetalState:
    """The coupled metal–soil solution for 1 A at the case's injection points (or ``injection``)."""
    network = metal_network(segments)
    Z = series_impedance(case, segments).matrix()
    ns = solve_network(R, network, Z, injection or injection_nodes(case, network), connections(case))
    return MetalState(network, ns)


def _solve_with_impedance(case: Case, segments: Segments, kernel: SoilKernel, progress: Progress | None):
    """Conductors with impedance: the coupled metal–soil solve (see solve_network), dense up to DENSE_LIMIT
    segments (``auto``), else GMRES on the compressed soil and inductance operators."""
    n = len(segments)
    kind = solver_kind(case, n)
    t0 = time.perf_counter()
    iterations = None
    try:
        if kind == "dense":
            operator = dense_operator(segments, kernel, AssemblyOptions(), progress)
            t1 = time.perf_counter()
            metal = network_solve(case, segments, operator.matrix)
        else:
            operator = compressed_operator(segments, kernel, AssemblyOptions(), progress)
            network = metal_network(segments)
            f = case.fault.frequency
            inductance = CompressedInductance(segments) if f > 0 else None
            internal = series_impedance(case, segments, inductance=False).internal
            t1 = time.perf_counter()
            ns, iterations = solve_network_iterative(operator, network, internal, inductance, f,
                                                     injection_nodes(case, network), connections(case))
            metal = MetalState(network, ns)
    except MemoryError:
        raise ModelTooLargeError(
            f"{case.source}: the coupled {kind} solve of {n:,} segments ran out of memory; use a longer "
            "discretization.max_segment or a machine with more memory") from None
    t2 = time.perf_counter()
    ns = metal.solution
    scale = 1.0 / abs(ns.impedance)
    groups = len(connections(case))
    seg_group = segments.group
    node_group = metal.network.group
    potential = np.array([ns.node_potential[ns.injection_nodes[0]] if g == 0 else
                          (ns.node_potential[node_group == g].mean() if (node_group == g).any() else 0.0)
                          for g in range(groups)], complex) * scale
    current = (np.bincount(seg_group, ns.leakage.real, minlength=groups) +
               1j * np.bincount(seg_group, ns.leakage.imag, minlength=groups)) * scale
    solution = Solution(ns.leakage * scale, abs(ns.impedance), ns.relative_residual, potential, current,
                        {"kind": kind, "network": True, "relative_residual": ns.relative_residual,
                         "power_balance": ns.power_balance, "operator_mb": round(operator.nbytes / 1e6, 1),
                         **({"iterations": iterations} if iterations is not None else {})},
                        metal)
    return segments, kernel, solution, {"assemble_s": t1 - t0, "solve_s": t2 - t1}


def connections(case: Case) -> tuple[str, ...]:
    """Connection of each potential group: the energised system, then every separate electrode."""
    return ("energised",) + tuple("energised" if e.connection == "bonded" else e.connection
                                  for e in case.separate_electrodes)
