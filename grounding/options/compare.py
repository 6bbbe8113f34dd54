"""Comparison of layout options: one row of figures per option and the winner by a chosen criterion."""

from __future__ import annotations

from dataclasses import dataclass

from ..study import StudyResult
from .quantities import Quantities, quantities

CRITERIA = ("cost", "margin", "resistance", "material")


@dataclass(frozen=True)
class Option:
    """A studied option with its quantities and margins."""

    label: str
    result: StudyResult
    quantities: Quantities

    @property
    def touch_margin(self) -> float:
        """(tolerable − worst) / tolerable for touch voltage (negative: fails)."""
        m = self.result.touch_check.margin
        return -1.0 if m is None else m

    @property
    def step_margin(self) -> float:
        """(tolerable − worst) / tolerable for step voltage; +inf where the standard sets no step limit."""
        c = self.result.step_check
        if c.limit is None:
            return float("inf")
        return -1.0 if c.margin is None else c.margin

    @property
    def worst_margin(self) -> float:
        """The smaller of the touch and step margins."""
        return min(self.touch_margin, self.step_margin)

    @property
    def passes(self) -> bool:
        """True when touch, step, mesh, separate-electrode touch and conductor size all pass."""
        return self.result.passes


def make_options(labels, results) -> list[Option]:
    """Options from labels and study results."""
    return [Option(label, r, quantities(r)) for label, r in zip(labels, results)]


def best_option(options: list[Option], by: str) -> tuple[int | None, str]:
    """Index of the winner and why.

    ``cost`` and ``material``: the cheapest (or lightest) option that passes every criterion (None
    when none passes); ``margin``: the largest worst-case margin; ``resistance``: the lowest Rg.
    """
    if by not in CRITERIA:
        raise ValueError(by)
    idx = list(range(len(options)))
    if by in ("cost", "material"):
        if by == "cost" and any(o.quantities.cost is None for o in options):
            return None, "not every case gives unit prices (costs block) to rank by cost"
        passing = [i for i in idx if options[i].passes]
        if not passing:
            return None, "no option passes every criterion"
        key = (lambda i: options[i].quantities.cost) if by == "cost" else (lambda i: options[i].quantities.mass_kg)
        best = min(passing, key=key)
        return best, f"the {'cheapest' if by == 'cost' else 'least material'} of the {len(passing)} option(s) that pass"
    n_pass = sum(o.passes for o in options)
    note = f"; {n_pass} of {len(options)} option(s) pass every criterion" if n_pass else "; NONE passes every criterion"
    if by == "margin":
        best = max(idx, key=lambda i: options[i].worst_margin)
        return best, "the largest worst-case margin to the touch and step limits" + note
    best = min(idx, key=lambda i: options[i].result.grid_resistance)
    return best, "the lowest grid resistance" + note
