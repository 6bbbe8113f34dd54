"""Which solver a discretisation gets (dense Cholesky or compressed operator and conjugate gradients) and the memory each needs."""

from __future__ import annotations

import math
import os

import numpy as np

from ..case.model import Case
from ..errors import ModelTooLargeError
from ..geometry.plan import map_size
from ..geometry.segments import Segments, segment
from ..operators.assembly import matrix_memory_bytes
from ..operators.mutual_resistance import compressed_memory_bytes

#: Share of physical memory a study may plan to use for its dense matrices.
MEMORY_SHARE = 0.5
#: Most surface-map points a study evaluates.
MAX_MAP_POINTS = 1_000_000
#: Largest system the ``auto`` solver factorises densely; above it the compressed operator and conjugate
#: gradients are faster. Measured build + solve, two-layer soil, 2 cores: 1 574 segments dense 1.2 s,
#: iterative 1.2 s; 3 074: 3.0 s / 2.1 s; 5 074: 8.7 s / 3.0 s; 8 134: 18.7 s / 3.8 s; 12 000 (uniform):
#: 39.5 s / 3.9 s. Rg agreed to 1e-6 throughout. Small cases keep the dense path they always had.
DENSE_LIMIT = 3_000


def available_memory() -> int:
    """Physical memory of this machine, bytes."""
    try:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):
        return 8 * 2 ** 30


def solver_kind(case: Case, n_segments: int) -> str:
    """``dense`` or ``iterative``: the case's ``discretization.solver``, with ``auto`` resolved by size."""
    chosen = case.discretization.solver
    if chosen == "auto":
        return "dense" if n_segments <= DENSE_LIMIT else "iterative"
    return chosen


def solver_memory_bytes(kind: str, n_segments: int) -> int:
    """Memory the ``dense`` or ``iterative`` solve of ``n_segments`` segments needs, bytes."""
    return matrix_memory_bytes(n_segments) if kind == "dense" else compressed_memory_bytes(n_segments)


def _round_up(x: float) -> float:
    """``x`` rounded up to two significant figures."""
    e = math.floor(math.log10(x)) - 1
    return math.ceil(x / 10 ** e - 1e-9) * 10 ** e


def _fitting_segment_length(case: Case, ratio: float, limit: float) -> float:
    """The shortest max_segment (m, two significant figures, rounded up) whose segments the solver fits in
    ``limit`` bytes, checked by segmenting (pieces shorter than the length do not split, so the count is not simply
    inverse to it); starts from the current length times ``ratio``."""
    from dataclasses import replace

    h = _round_up(case.discretization.max_segment * ratio)
    for _ in range(24):
        trial = replace(case, discretization=replace(case.discretization, max_segment=h))
        n = len(segment(trial))
        if solver_memory_bytes(solver_kind(trial, n), n) <= limit:
            return h
        h = _round_up(h * 1.1)
    return h


def check_model_size(case: Case, segments: Segments) -> None:
    """Refuse a discretisation whose solver would not fit in memory, saying what each solver would need."""
    n = len(segments)
    kind = solver_kind(case, n)
    dense, compressed = solver_memory_bytes("dense", n), solver_memory_bytes("iterative", n)
    need = solver_memory_bytes(kind, n)
    limit = MEMORY_SHARE * available_memory()
    if need > limit:
        gib = 2 ** 30
        if kind == "dense" and compressed <= limit:
            fix = "use discretization.solver: iterative (or auto)"
        else:
            fix = f"use max_segment of at least {_fitting_segment_length(case, need / limit, limit):g} m"
        raise ModelTooLargeError(
            f"{case.source}: discretization.max_segment = {case.discretization.max_segment:g} m gives {n:,} "
            f"segments; the {kind} solve would need {need / gib:.1f} GiB (dense: {dense / gib:.1f} GiB, iterative: "
            f"{compressed / gib:.1f} GiB), more than the {limit / gib:.1f} GiB this machine can spare; {fix}")
    nx, ny = map_size(segments, case.surface)
    if nx * ny > MAX_MAP_POINTS:
        raise ModelTooLargeError(
            f"{case.source}: surface.resolution = {case.surface.resolution:g} m gives a map of {nx:,.0f} × {ny:,.0f} = "
            f"{nx * ny:,.0f} points (at most {MAX_MAP_POINTS:,}); use a resolution of at least "
            f"{case.surface.resolution * np.sqrt(nx * ny / MAX_MAP_POINTS):.2g} m or a smaller margin")
