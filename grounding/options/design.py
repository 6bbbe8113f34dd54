"""Design search: the least material (or cost) in a sweep space that passes every criterion.

Quantities and cost follow from the geometry alone, so the options are ranked by them before any
solve and studied in that order, a batch at a time; the first batch that holds a passing option ends
the search. The answer is exact for the sweep space: every cheaper option was studied and failed.
"""

from __future__ import annotations

from dataclasses import dataclass

from .compare import Option, make_options
from .quantities import geometry_quantities
from .runner import run_options
from .sweep import Variant


@dataclass(frozen=True)
class DesignResult:
    """The search's answer and the options it studied (cheapest first)."""

    best: Option | None
    studied: list[Option]
    skipped: int
    by: str


def estimated_quantity(v: Variant, by: str) -> float:
    """Mass (kg) or cost of an option from its geometry alone, the same numbers the study reports."""
    q = geometry_quantities(v.case)
    return q.cost if by == "cost" and q.cost is not None else q.mass_kg


def search(variants: list[Variant], by: str = "material", workers: int = 1, cluster: str | None = None,
           progress=None) -> DesignResult:
    """Study the options in increasing quantity until one passes; return the cheapest passing one."""
    ranked = sorted(variants, key=lambda v: estimated_quantity(v, by))
    batch = max(1, workers)
    studied: list[Option] = []
    for start in range(0, len(ranked), batch):
        chunk = ranked[start:start + batch]
        results = run_options([v.case for v in chunk], workers=workers, cluster=cluster, estimate_error=False)
        opts = make_options([v.label for v in chunk], results)
        studied += opts
        if progress:
            progress(len(studied), len(ranked))
        passing = [o for o in opts if o.passes]
        if passing:
            key = (lambda o: o.quantities.cost) if by == "cost" and passing[0].quantities.cost is not None \
                else (lambda o: o.quantities.mass_kg)
            best = min(passing, key=key)
            return DesignResult(best, studied, len(ranked) - len(studied), by)
    return DesignResult(None, studied, 0, by)
