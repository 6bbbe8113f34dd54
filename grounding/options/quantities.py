"""Material quantities and cost of a layout."""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..case import Case
from ..geometry import Segments
from ..materials import MATERIALS
from ..study import StudyResult


@dataclass(frozen=True)
class Quantities:
    """What a layout takes.

    Attributes
    ----------
    conductor_length_m : float
        Buried horizontal (and sloping) conductor, m.
    rod_count : int
    rod_length_m : float
        Total rod length, m.
    mass_kg : float
        Metal mass of conductors and rods (typical densities; an estimate).
    surface_layer_area_m2 : float
        Touch area covered by the surface layer (0 without one), m².
    cost : float or None
        From the case's unit prices; None when the case gives none.
    currency : str
    """

    conductor_length_m: float
    rod_count: int
    rod_length_m: float
    mass_kg: float
    surface_layer_area_m2: float
    cost: float | None
    currency: str = ""


def quantities(r: StudyResult) -> Quantities:
    """Quantities of a studied layout."""
    return layout_quantities(r.case, r.segments, r.surface.touch_area)


def layout_quantities(c: Case, seg: Segments, touch_area) -> Quantities:
    """Quantities of a layout from its geometry alone (no solve needed). Conductor lengths come from the
    merged, noded geometry, so metal shared by two electrodes is counted once; the surface layer covers
    the touch area."""
    rod = seg.is_rod
    conductor_len = float(seg.length[~rod].sum())
    rod_len = float(seg.length[rod].sum())
    area_per_m = math.pi * seg.radius ** 2
    mass = float((seg.length * area_per_m).sum()) * MATERIALS[c.electrodes.material].density
    rod_count = int(seg.conductors.is_rod.sum())
    area = float(touch_area.area) if c.surface_layer else 0.0
    cost = None
    if c.costs is not None:
        k = c.costs
        layer = area * (c.surface_layer.thickness / 0.1) * k.surface_layer_per_m2 if c.surface_layer else 0.0
        cost = conductor_len * k.conductor_per_m + rod_len * k.rod_per_m + rod_count * k.rod_each + layer
    return Quantities(conductor_len, rod_count, rod_len, mass, area, cost, c.costs.currency if c.costs else "")
