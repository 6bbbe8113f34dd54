"""Comparison of layout options: one row of figures per option and the winner by a chosen criterion."""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..case.model import Case
from ..study.result import StudyResult
from .quantities import Quantities, geometry_quantities, quantities
from .recorded import RecordedStudy, number

CRITERIA = ("cost", "margin", "resistance", "material")


@dataclass(frozen=True)
class Outcome:
    """The figures an option is compared by, from a study just run or from its recorded results JSON.

    Voltages in V, resistance in Ω; NaN where a voltage was evaluated nowhere; ``tolerable_step`` None
    where the standard sets no step limit; ``separate_ok`` None without separate electrodes.
    """

    source: str
    title: str
    grid_resistance: float
    ground_potential_rise: float
    worst_touch: float
    tolerable_touch: float
    worst_step: float
    tolerable_step: float | None
    worst_mesh: float | None
    touch_ok: bool
    step_ok: bool | None
    mesh_ok: bool | None
    conductor_ok: bool
    separate_ok: bool | None
    governing_scenarios: tuple[str, ...]
    has_scenarios: bool
    passes: bool

    @classmethod
    def of_study(cls, r: StudyResult) -> "Outcome":
        """The outcome of a study result."""
        mesh = r.mesh_check.worst
        return cls(r.case.source, r.case.title, r.grid_resistance, r.ground_potential_rise, r.worst_touch,
                   r.tolerable_touch, r.worst_step, r.tolerable_step, None if mesh is None else mesh.value,
                   r.touch_ok, r.step_ok, r.mesh_ok, bool(r.conductor.ok), r.separate_ok if r.separate else None,
                   tuple(dict.fromkeys(n for n in (r.touch_check.scenario, r.step_check.scenario) if n)),
                   bool(r.scenarios), bool(r.passes))

    @classmethod
    def of_recorded(cls, rec: RecordedStudy) -> "Outcome":
        """The outcome stored in a results document (``summary`` block of format 1)."""
        doc = rec.document
        s = doc["summary"]
        gov = s.get("governing_scenario") or {}
        step_limit = s["tolerable_step_voltage_v"]
        return cls(doc["case"].get("file", rec.path), doc["case"].get("title", ""), number(s["grid_resistance_ohm"]),
                   number(s["ground_potential_rise_v"]), number(s["max_touch_voltage_v"]),
                   number(s["tolerable_touch_voltage_v"]), number(s["max_step_voltage_v"]),
                   None if step_limit is None else float(step_limit),
                   None if s["max_mesh_voltage_v"] is None else float(s["max_mesh_voltage_v"]),
                   bool(s["touch_ok"]), s["step_ok"], s["mesh_ok"], bool(doc["conductor"]["ok"]),
                   s["separate_electrodes_ok"] if doc.get("separate_electrodes") else None,
                   tuple(dict.fromkeys(n for n in (gov.get("touch"), gov.get("step")) if n)),
                   bool(doc.get("scenarios")), bool(s["all_pass"]))

    @staticmethod
    def _margin(worst: float, limit: float | None) -> float | None:
        if limit is None or not math.isfinite(worst):
            return None
        return (limit - worst) / limit

    @property
    def touch_margin(self) -> float | None:
        """(tolerable − worst) / tolerable for touch voltage; None when evaluated nowhere."""
        return self._margin(self.worst_touch, self.tolerable_touch)

    @property
    def step_margin(self) -> float | None:
        """(tolerable − worst) / tolerable for step voltage; None when evaluated nowhere or without a limit."""
        return self._margin(self.worst_step, self.tolerable_step)


@dataclass(frozen=True)
class Option:
    """A studied option with its quantities and margins.

    ``result`` is the study (None when the option's figures were read from a results file, ``recorded``).
    """

    label: str
    result: StudyResult | None
    quantities: Quantities
    outcome: Outcome
    recorded: RecordedStudy | None = None

    @property
    def touch_margin(self) -> float:
        """(tolerable − worst) / tolerable for touch voltage (negative: fails)."""
        m = self.outcome.touch_margin
        return -1.0 if m is None else m

    @property
    def step_margin(self) -> float:
        """(tolerable − worst) / tolerable for step voltage; +inf where the standard sets no step limit."""
        if self.outcome.tolerable_step is None:
            return float("inf")
        m = self.outcome.step_margin
        return -1.0 if m is None else m

    @property
    def worst_margin(self) -> float:
        """The smaller of the touch and step margins."""
        return min(self.touch_margin, self.step_margin)

    @property
    def passes(self) -> bool:
        """True when touch, step, mesh, separate-electrode touch and conductor size all pass."""
        return self.outcome.passes


def make_options(labels, results) -> list[Option]:
    """Options from labels and study results."""
    return [Option(label, r, quantities(r), Outcome.of_study(r)) for label, r in zip(labels, results)]


def recorded_option(label: str, case: Case, rec: RecordedStudy) -> Option:
    """An option whose figures come from its study's results file (see :mod:`.recorded`); the quantities
    follow from the case's geometry, as in a fresh study."""
    return Option(label, None, geometry_quantities(case), Outcome.of_recorded(rec), rec)


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
    best = min(idx, key=lambda i: options[i].outcome.grid_resistance)
    return best, "the lowest grid resistance" + note
