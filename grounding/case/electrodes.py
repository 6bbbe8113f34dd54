"""Case sections that describe buried metal: the ``electrodes`` block and its grids, conductors and rods."""

from __future__ import annotations

import difflib
import math
from typing import Any

from ..materials import MATERIALS
from .document import MAX_BURIAL_DEPTH, MAX_ROD_LENGTH, Checks, fmt
from .model import Conductor, Electrodes, Grid, Rod, Soil

#: Most meshes along one side of a grid (a spacing given where a count is asked for is the usual cause).
MAX_MESHES = 1000


#: One circular mil in m² (π/4 · (25.4e-6 m)²).
CIRCULAR_MIL = math.pi / 4 * 25.4e-6 ** 2


def awg_diameter(gauge: int) -> float:
    """Diameter (m) of AWG gauge ``gauge`` (0 for 1/0, −1 for 2/0, … −3 for 4/0): the defining rule
    d = 0.127 mm · 92^((36 − n)/39) of the American Wire Gauge (ASTM B258)."""
    return 0.127e-3 * 92 ** ((36 - gauge) / 39)


def trade_size_area(text: str) -> float | None:
    """Area (m²) of a conductor size written as the trade writes it: '4 AWG', '4/0 AWG', '250 kcmil'
    (or 'MCM'); None when the text is not such a size. AWG areas are of a solid wire of the gauge's diameter
    (a stranded conductor of that gauge has the same nominal area)."""
    import re

    t = " ".join(text.strip().lower().split())
    m = re.fullmatch(r"(\d+(?:\.\d+)?) ?(kcmil|mcm)", t)
    if m:
        return float(m.group(1)) * 1000 * CIRCULAR_MIL
    m = re.fullmatch(r"(\d{1,2})/0 ?awg", t)
    if m and 1 <= int(m.group(1)) <= 4:
        return math.pi / 4 * awg_diameter(1 - int(m.group(1))) ** 2
    m = re.fullmatch(r"(\d{1,2}) ?awg", t)
    if m and int(m.group(1)) <= 40:
        return math.pi / 4 * awg_diameter(int(m.group(1))) ** 2
    return None


def _looks_numeric(text: str) -> bool:
    try:
        float(text)
        return True
    except ValueError:
        return False


class ElectrodeSections(Checks):
    """Readers of the electrode sections of a case."""

    def electrodes(self, value: Any, soil: Soil) -> Electrodes:
        m = self.mapping("electrodes", value, ("material", "grids", "conductors", "rods", "ambient_temperature",
                                               "max_temperature", "drawing", "conductor_impedance",
                                               "conductor_temperature"))
        material = m.get("material", "copper-annealed")
        if not isinstance(material, str) or material not in MATERIALS:
            near = difflib.get_close_matches(str(material), list(MATERIALS), n=1, cutoff=0.4)
            hint = f"did you mean '{near[0]}'?" if near else f"choose one of {', '.join(MATERIALS)}"
            raise self.doc.fail("electrodes.material", f"'{material}' is not in the material table; {hint}")
        grids, conductors, rods = self.metal("electrodes", m)
        drawing = None
        if "drawing" in m:
            drawn_conductors, drawn_rods, (file, sha), notes = self.drawing(m["drawing"])
            conductors, rods = conductors + drawn_conductors, rods + drawn_rods
            drawing = (file, sha, notes[0])
        if not (grids or conductors or rods):
            raise self.doc.fail("electrodes", "has no electrodes; give at least one of grids, conductors or rods")
        ta = self.number("electrodes.ambient_temperature", m.get("ambient_temperature", 40.0), "°C", gt=-60, lt=80)
        tm = m.get("max_temperature")
        if tm is not None:
            tm = self.number("electrodes.max_temperature", tm, "°C", gt=ta,
                             le=MATERIALS[material].fusing_temperature)
        impedance = self.flag("electrodes.conductor_impedance", m.get("conductor_impedance", False))
        tc = m.get("conductor_temperature")
        if tc is not None:
            tc = self.number("electrodes.conductor_temperature", tc, "°C", gt=-60, le=400)
        return Electrodes(material=material, grids=grids, conductors=conductors, rods=rods,
                          ambient_temperature=ta, max_temperature=tm, drawing=drawing, conductor_impedance=impedance,
                          conductor_temperature=tc)

    def metal(self, path: str, m: dict) -> tuple[tuple[Grid, ...], tuple[Conductor, ...], tuple[Rod, ...]]:
        """The grids, conductors and rods listed in mapping ``m`` at ``path``."""
        grids = tuple(self.grid(f"{path}.grids[{i}]", g)
                      for i, g in enumerate(self.sequence(f"{path}.grids", m.get("grids"))))
        conductors = tuple(self.conductor(f"{path}.conductors[{i}]", c)
                           for i, c in enumerate(self.sequence(f"{path}.conductors", m.get("conductors"))))
        rods = tuple(self.rod(f"{path}.rods[{i}]", r)
                     for i, r in enumerate(self.sequence(f"{path}.rods", m.get("rods"))))
        return grids, conductors, rods

    def _label(self, p: str, m: dict) -> str:
        return self.name(f"{p}.name", m["name"]) if "name" in m else ""

    def element_material(self, p: str, m: dict) -> str:
        """An element's own material (empty: the electrodes' material)."""
        if "material" not in m:
            return ""
        material = m["material"]
        if not isinstance(material, str) or material not in MATERIALS:
            near = difflib.get_close_matches(str(material), list(MATERIALS), n=1, cutoff=0.4)
            hint = f"did you mean '{near[0]}'?" if near else f"choose one of {', '.join(MATERIALS)}"
            raise self.doc.fail(f"{p}.material", f"'{material}' is not in the material table; {hint}")
        return material

    def size(self, p: str, m: dict) -> tuple[float, float | None]:
        """(diameter for the field solution, m; nominal cross-section, m²) from ``diameter`` (and
        ``cross_section``) or from ``tape: [width, thickness]`` (a flat strip: equivalent diameter width/2 from
        the conformal map of a thin strip onto a circle, Dwight 1936; true area width × thickness)."""
        if "tape" in m:
            if "diameter" in m or "cross_section" in m:
                raise self.doc.fail(f"{p}.tape", "cannot stand beside diameter or cross_section; a tape gives both")
            w, t = self.vector(f"{p}.tape", m["tape"], 2, "m", "width, thickness")
            if not 0 < t <= w:
                raise self.doc.fail(f"{p}.tape", f"needs 0 < thickness <= width (m), got [{w:g}, {t:g}]")
            if t > 0.25 * w:
                raise self.doc.fail(f"{p}.tape", "is not a thin strip (thickness above a quarter of the width); give "
                                                 "the diameter of a round conductor of the same girth instead")
            return self.diameter(f"{p}.tape", w / 2), w * t
        if "diameter" not in m:
            raise self.doc.fail(p, "needs diameter (m) or tape: [width, thickness] (m)")
        d = self.diameter(f"{p}.diameter", m["diameter"])
        return d, self.cross_section(p, m, d)

    def cross_section(self, p: str, m: dict, diameter: float) -> float | None:
        """Nominal cross-section (m²) of a stranded or shaped conductor; it must fit in the circle of its
        outer diameter."""
        if "cross_section" not in m:
            return None
        value = m["cross_section"]
        if isinstance(value, str) and not _looks_numeric(value):
            a = trade_size_area(value)
            if a is None:
                raise self.doc.fail(f"{p}.cross_section", f"'{value}' is not a size this tool reads; give m² (e.g. "
                                                          "120e-6), an AWG size ('2 AWG', '4/0 AWG') or kcmil ('250 kcmil')")
        else:
            a = self.number(f"{p}.cross_section", value, "m²", gt=0)
        circle = math.pi * diameter ** 2 / 4
        if a > circle * (1 + 1e-9):
            raise self.doc.fail(f"{p}.cross_section", f"= {a * 1e6:g} mm² is larger than the circle of the diameter "
                                                      f"{diameter * 1000:g} mm ({circle * 1e6:.1f} mm²); give the "
                                                      "area in m² (e.g. 120e-6 for 120 mm²)")
        return a

    def grid(self, p: str, value: Any) -> Grid:
        m = self.mapping(p, value, ("origin", "size", "meshes", "depth", "diameter", "name", "cross_section", "tape",
                                    "material"), ("origin", "size", "meshes", "depth"))
        origin = self.vector(f"{p}.origin", m["origin"], 2, "m", "x, y")
        size = self.vector(f"{p}.size", m["size"], 2, "m", "along x, along y")
        for i in range(2):
            if size[i] <= 0:
                raise self.doc.fail(f"{p}.size[{i}]", f"must be > 0 m, got {size[i]:g}")
        meshes = m["meshes"]
        if not isinstance(meshes, list) or len(meshes) != 2:
            raise self.doc.fail(f"{p}.meshes", f"must be a list of 2 whole numbers (along x, along y), got {fmt(meshes)}")
        meshes = tuple(self.integer(f"{p}.meshes[{i}]", v, le=MAX_MESHES) for i, v in enumerate(meshes))
        depth = self.depth(f"{p}.depth", self.number(f"{p}.depth", m["depth"], "m"))
        d, area = self.size(p, m)
        for i, axis in enumerate("xy"):
            self.long_enough(f"{p}.size[{i}]", size[i], d, "the grid side along " + axis + " ")
            if meshes[i]:
                self.long_enough(f"{p}.meshes[{i}]", size[i] / meshes[i], d, f"the mesh spacing along {axis} ")
        return Grid(origin=origin, size=size, meshes=meshes, depth=depth, diameter=d, key=p, name=self._label(p, m),
                    cross_section=area, material=self.element_material(p, m))

    def conductor(self, p: str, value: Any) -> Conductor:
        m = self.mapping(p, value, ("start", "end", "diameter", "name", "cross_section", "tape", "material"),
                         ("start", "end"))
        a = self.vector(f"{p}.start", m["start"], 3, "m", "x, y, depth")
        b = self.vector(f"{p}.end", m["end"], 3, "m", "x, y, depth")
        self.depth(f"{p}.start[2]", a[2])
        self.depth(f"{p}.end[2]", b[2])
        d, area = self.size(p, m)
        self.long_enough(p, math.dist(a, b), d)
        return Conductor(a, b, d, key=p, name=self._label(p, m), cross_section=area, material=self.element_material(p, m))

    def rod(self, p: str, value: Any) -> Rod:
        m = self.mapping(p, value, ("top", "length", "diameter", "name", "cross_section", "material"),
                         ("top", "length", "diameter"))
        top = self.vector(f"{p}.top", m["top"], 3, "m", "x, y, depth")
        if top[2] < 0:
            raise self.doc.fail(f"{p}.top[2]", f"depth must be >= 0 m (z is positive downward), got {top[2]:g}")
        if top[2] > MAX_BURIAL_DEPTH:
            raise self.doc.fail(f"{p}.top[2]", f"= {top[2]:g} m is deeper than {MAX_BURIAL_DEPTH:g} m for a rod's top: "
                                               f"give metres (e.g. {top[2] / 1000:g} for {top[2]:g} mm)")
        length = self.number(f"{p}.length", m["length"], "m", gt=0)
        if length >= MAX_ROD_LENGTH:
            raise self.doc.fail(f"{p}.length", f"= {length:g} m is implausibly long for a rod (at least "
                                               f"{MAX_ROD_LENGTH:g} m): give metres (e.g. {length / 1000:g} for "
                                               f"{length:g} mm)")
        d = self.diameter(f"{p}.diameter", m["diameter"])
        self.long_enough(f"{p}.length", length, d)
        return Rod(top, length, d, key=p, name=self._label(p, m), cross_section=self.cross_section(p, m, d),
                   material=self.element_material(p, m))
