"""Case sections that describe the site around the electrodes: surface zones (where people stand),
touch areas (where they can reach the main system's metal), separate electrodes (other buried metal
that floats, is tied to remote earth or is bonded) and potential contour levels.
"""

from __future__ import annotations

from typing import Any

from .document import Checks, fmt
from .model import CONNECTIONS, NATIVE_ZONE, Area, Electrodes, SeparateElectrode, SurfaceLayer, SurfaceZone, TouchArea

#: Overlap area (m²) below which two zones only share an edge.
OVERLAP_TOLERANCE = 1e-6
#: Most surface zones, touch areas, separate electrodes and contour levels a case may list.
MAX_SITE_ITEMS = 100


def shapely_polygon(area: Area):
    """The shapely polygon of an :class:`Area` (m)."""
    from shapely.geometry import Polygon

    return Polygon(area.shell, [list(h) for h in area.holes])


class SiteSections(Checks):
    """Readers of the site sections of a case."""

    def area(self, path: str, m: dict, key: str = "polygon") -> Area:
        """``polygon`` (or ``key``) and optional ``holes`` of mapping ``m`` as a valid :class:`Area`."""
        from shapely.geometry import Polygon
        from shapely.validation import explain_validity

        shell = self.ring(f"{path}.{key}", m[key])
        holes = tuple(self.ring(f"{path}.holes[{i}]", h) for i, h in enumerate(self.sequence(f"{path}.holes",
                                                                                              m.get("holes"))))
        area = Area(shell, holes)
        outer = Polygon(shell)
        if not outer.is_valid or outer.area <= 0:
            raise self.doc.fail(f"{path}.{key}", f"is not a simple polygon ({explain_validity(outer)}); "
                                                   "list the corners in order around the area without crossings")
        for i, h in enumerate(holes):
            hp = Polygon(h)
            if not hp.is_valid or hp.area <= 0:
                raise self.doc.fail(f"{path}.holes[{i}]", f"is not a simple polygon ({explain_validity(hp)}); "
                                                          "list the corners in order without crossings")
            if not outer.contains(hp):
                raise self.doc.fail(f"{path}.holes[{i}]", "is not inside its polygon; a hole must lie within the "
                                                          "outer boundary")
        poly = shapely_polygon(area)
        if not poly.is_valid:
            raise self.doc.fail(f"{path}.holes", f"overlap each other or the boundary ({explain_validity(poly)}); "
                                                 "holes must be separate and inside the polygon")
        return area

    def layer(self, path: str, m: dict) -> SurfaceLayer | None:
        """The zone covering: resistivity (Ω·m, or null for native soil) and thickness (m)."""
        rho = m["resistivity"]
        if rho is None:
            if m.get("thickness") is not None:
                raise self.doc.fail(f"{path}.thickness", "goes only with a resistivity; a zone of native soil "
                                                         "(resistivity: null) has no layer")
            return None
        rho = self.number(f"{path}.resistivity", rho, "Ω·m", gt=0)
        if "thickness" not in m:
            raise self.doc.fail(path, "needs the layer thickness in m beside its resistivity")
        h = self.number(f"{path}.thickness", m["thickness"], "m", gt=0)
        if h > 1.0:
            raise self.doc.fail(f"{path}.thickness", f"= {h:g} m is too thick for a surface layer "
                                "(the Cs derating is for layers of a few cm to 0.3 m); model it as a soil layer")
        return SurfaceLayer(rho, h)

    def surface_zones(self, value: Any) -> tuple[SurfaceZone, ...]:
        items = self.sequence("surface_zones", value)
        if value is not None and not items:
            raise self.doc.fail("surface_zones", "is empty; list zones or leave the key out")
        if len(items) > MAX_SITE_ITEMS:
            raise self.doc.fail("surface_zones", f"lists {len(items)} zones; give at most {MAX_SITE_ITEMS}")
        zones, names = [], {}
        for i, item in enumerate(items):
            p = f"surface_zones[{i}]"
            m = self.mapping(p, item, ("name", "polygon", "holes", "resistivity", "thickness", "body_weight"),
                             ("name", "polygon", "resistivity"))
            weight = m.get("body_weight")
            if weight is not None and (isinstance(weight, bool) or weight not in (50, 70)):
                raise self.doc.fail(f"{p}.body_weight", f"must be 50 or 70 (kg, IEEE Std 80), got {fmt(weight)}; "
                                                        "leave it out to use criteria.body_weight")
            name = self.name(f"{p}.name", m["name"])
            if name == NATIVE_ZONE:
                raise self.doc.fail(f"{p}.name", f"'{NATIVE_ZONE}' names the soil outside every zone; choose "
                                                 "another name")
            if name in names:
                raise self.doc.fail(f"{p}.name", f"'{name}' is already the name of surface_zones[{names[name]}]; "
                                                 "give each zone its own name")
            names[name] = i
            zones.append(SurfaceZone(name, self.area(p, m), self.layer(p, m), p,
                                     None if weight is None else int(weight)))
        polys = [shapely_polygon(z.area) for z in zones]
        for i in range(len(zones)):
            for j in range(i):
                common = polys[i].intersection(polys[j])
                if common.area > OVERLAP_TOLERANCE:
                    x, y = common.representative_point().coords[0]
                    raise self.doc.fail(f"surface_zones[{i}]",
                                        f"'{zones[i].name}' overlaps '{zones[j].name}' (surface_zones[{j}]) over "
                                        f"{common.area:.3g} m², e.g. at ({x:.2f}, {y:.2f}) m; a point of the "
                                        "surface stands in one zone only: cut one zone out of the other (holes)")
        return tuple(zones)

    def separate_electrodes(self, value: Any, electrodes: Electrodes) -> tuple[SeparateElectrode, ...]:
        items = self.sequence("separate_electrodes", value)
        if len(items) > MAX_SITE_ITEMS:
            raise self.doc.fail("separate_electrodes", f"lists {len(items)} electrodes; give at most {MAX_SITE_ITEMS}")
        out, names = [], {}
        for i, item in enumerate(items):
            p = f"separate_electrodes[{i}]"
            m = self.mapping(p, item, ("name", "connection", "grids", "conductors", "rods", "rely_on"),
                             ("name", "connection"))
            name = self.name(f"{p}.name", m["name"])
            if name in names:
                raise self.doc.fail(f"{p}.name", f"'{name}' is already the name of separate_electrodes[{names[name]}]")
            names[name] = i
            kind = m["connection"]
            if kind not in CONNECTIONS:
                raise self.doc.fail(f"{p}.connection", f"must be one of {', '.join(CONNECTIONS)} (not bonded to "
                                                       f"anything, tied to remote earth, part of the main system), "
                                                       f"got {fmt(kind)}")
            grids, conductors, rods = self.metal(p, m)
            if not (grids or conductors or rods):
                raise self.doc.fail(p, "has no metal; give at least one of grids, conductors or rods")
            rely = m.get("rely_on", True)
            if not isinstance(rely, bool):
                raise self.doc.fail(f"{p}.rely_on", f"must be true or false, got {fmt(rely)}; false for metal the owner "
                                                    "does not control (the site is then also judged without it)")
            out.append(SeparateElectrode(name, kind, grids, conductors, rods, p, self.doc.line(p), rely))
        return tuple(out)

    def contours(self, path: str, value: Any) -> tuple[float, ...]:
        levels = self.sequence(path, value)
        if len(levels) > MAX_SITE_ITEMS:
            raise self.doc.fail(path, f"lists {len(levels)} levels; give at most {MAX_SITE_ITEMS}")
        out = tuple(self.number(f"{path}[{i}]", v, "V", gt=0) for i, v in enumerate(levels))
        if len(set(out)) != len(out):
            raise self.doc.fail(path, "lists a level twice")
        return tuple(sorted(out))

    def touch_areas(self, path: str, value: Any, electrodes: Electrodes,
                    separate: tuple[SeparateElectrode, ...]) -> tuple[TouchArea, ...]:
        """``surface.touch_areas``: explicit areas ``{polygon, holes}`` or ``{reach, metal}`` entries."""
        items = self.sequence(path, value)
        if value is not None and not items:
            raise self.doc.fail(path, "is empty; list areas or leave the key out for the default")
        if len(items) > MAX_SITE_ITEMS:
            raise self.doc.fail(path, f"lists {len(items)} areas; give at most {MAX_SITE_ITEMS}")
        names = _metal_names(electrodes, separate)
        out = []
        for i, item in enumerate(items):
            p = f"{path}[{i}]"
            m = self.mapping(p, item, ("polygon", "holes", "reach", "metal"))
            if "polygon" in m:
                for k in ("reach", "metal"):
                    if k in m:
                        raise self.doc.fail(f"{p}.{k}", "cannot stand beside polygon; give an area or a reach "
                                                         "around metal, in separate entries")
                out.append(TouchArea(area=self.area(p, m)))
                continue
            if "holes" in m:
                raise self.doc.fail(f"{p}.holes", "goes only with a polygon")
            if "reach" not in m:
                raise self.doc.fail(p, "needs either polygon (an area) or reach (m around metal of the main system)")
            reach = self.number(f"{p}.reach", m["reach"], "m", gt=0, le=100)
            metal = []
            for j, n in enumerate(self.sequence(f"{p}.metal", m.get("metal"))):
                n = self.name(f"{p}.metal[{j}]", n)
                if n not in names:
                    raise self.doc.fail(f"{p}.metal[{j}]", f"'{n}' names no metal of the main system; names: "
                                                          f"{', '.join(sorted(names)) or 'none (add name: keys)'}")
                if names[n] is None:
                    raise self.doc.fail(f"{p}.metal[{j}]", f"'{n}' is not bonded to the main system; its touch "
                                                          "voltage is reported on its own")
                metal.append(names[n])
            out.append(TouchArea(reach=reach, metal=tuple(metal)))
        return tuple(out)


def _metal_names(electrodes: Electrodes, separate: tuple[SeparateElectrode, ...]) -> dict[str, str | None]:
    """Names of metal a touch area may refer to → key path (None for metal not bonded to the main system)."""
    names: dict[str, str | None] = {}
    for item in electrodes.grids + electrodes.conductors + electrodes.rods:
        if item.name:
            names.setdefault(item.name, item.key)
    for e in separate:
        names[e.name] = e.key if e.connection == "bonded" else None
        for item in e.grids + e.conductors + e.rods:
            if item.name:
                names.setdefault(item.name, item.key if e.connection == "bonded" else None)
    return names
