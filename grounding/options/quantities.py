"""Material quantities and cost of a layout."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..case.model import Case
from ..geometry.segments import Segments
from ..materials import MATERIALS
from ..study.result import StudyResult


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


def _kg_per_m(element, default_material: str, radius: float) -> float:
    """kg per metre of an element: its nominal area (or the circle of its radius) times its material's density."""
    if element is None:
        return math.pi * radius ** 2 * MATERIALS[default_material].density
    return element.area * MATERIALS[element.material or default_material].density


def layout_quantities(c: Case, seg: Segments, touch_area) -> Quantities:
    """Quantities of a layout from its geometry alone (no solve needed). Conductor lengths come from the
    merged, noded geometry, so metal shared by two electrodes is counted once; separate electrodes (fences,
    pipes) are not part of the layout and are left out. A whole-map surface layer is priced over the
    touch area; surface zones over their own areas."""
    from ..case.site import shapely_polygon

    own = seg.conductors.matching(("electrodes",))          # the layout's own metal (a piece shared with a fence counts)
    keep = own[seg.conductor]
    rod = seg.is_rod
    conductor_len = float(seg.length[~rod & keep].sum())
    rod_len = float(seg.length[rod & keep].sum())
    # mass per metre of each conductor from its element's nominal area (tape, stranded) and own material
    el = c.electrodes
    elements = {x.key: x for x in el.grids + el.conductors + el.rods}
    per_m = np.array([_kg_per_m(elements.get(k.split(" + ")[0]), el.material, r)
                      for k, r in zip(seg.conductors.keys, seg.conductors.radius)])
    mass = float((seg.length * per_m[seg.conductor])[keep].sum())
    rod_count = int((seg.conductors.is_rod & own).sum())
    covered = [(shapely_polygon(z.area).area, z.layer.thickness) for z in c.surface_zones if z.layer is not None]
    if c.surface_layer is not None:
        covered = [(float(touch_area.area), c.surface_layer.thickness)]
    area = float(sum(a for a, _ in covered))
    cost = None
    if c.costs is not None:
        k = c.costs
        layer = sum(a * (h / 0.1) * k.surface_layer_per_m2 for a, h in covered)
        cost = conductor_len * k.conductor_per_m + rod_len * k.rod_per_m + rod_count * k.rod_each + layer
    return Quantities(conductor_len, rod_count, rod_len, mass, area, cost, c.costs.currency if c.costs else "")


def geometry_quantities(c: Case) -> Quantities:
    """Quantities of a case's layout without a study: its segments and default touch area."""
    from ..geometry.plan import touch_region
    from ..geometry.segments import segment

    s = segment(c)
    area, _ = touch_region(s, c.surface)
    return layout_quantities(c, s, area)
