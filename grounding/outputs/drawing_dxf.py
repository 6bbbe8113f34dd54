"""The study as a DXF drawing (ezdxf) for a drafting office to overlay on the yard drawing: electrodes,
separate electrodes, touch area, surface zones, probes, the requested potential contours, the touch-limit
contour and the worst points, in metres on the case's coordinates."""

from __future__ import annotations

import io

import numpy as np

from ..study.result import StudyResult
from ..surface.contours import contour_lines

#: DXF colour index per layer (ACI), and the layers written.
LAYERS = {"GRD-CONDUCTORS": 5, "GRD-RODS": 5, "GRD-SEPARATE": 30, "GRD-TOUCH-AREA": 8, "GRD-ZONES": 9,
          "GRD-PROBES": 32, "GRD-CONTOURS": 1, "GRD-TOUCH-LIMIT": 1, "GRD-WORST": 7}


def _polygon_rings(geometry):
    for poly in getattr(geometry, "geoms", [geometry]):
        if poly.is_empty or not hasattr(poly, "exterior"):
            continue
        yield from [list(poly.exterior.coords), *[list(r.coords) for r in poly.interiors]]


def study_dxf(r: StudyResult) -> bytes:
    """The DXF document as bytes (R2010, units metres)."""
    import ezdxf

    doc = ezdxf.new("R2010", setup=False)
    doc.header["$INSUNITS"] = 6                        # metres
    for name, color in LAYERS.items():
        doc.layers.add(name, color=color)
    msp = doc.modelspace()
    seg = r.segments
    c = seg.conductors
    separate = np.zeros(len(c.keys), bool)
    for e in r.case.separate_electrodes:
        separate |= c.matching((e.key,))
    for k in range(len(c.keys)):
        layer = "GRD-SEPARATE" if separate[k] else ("GRD-RODS" if c.is_rod[k] else "GRD-CONDUCTORS")
        if c.is_rod[k]:
            msp.add_circle(tuple(c.start[k, :2]), radius=max(c.radius[k], 0.05), dxfattribs={"layer": layer})
        else:
            msp.add_line(tuple(c.start[k, :2]), tuple(c.end[k, :2]), dxfattribs={"layer": layer})
    for ring in _polygon_rings(r.surface.touch_area):
        msp.add_lwpolyline(ring, close=True, dxfattribs={"layer": "GRD-TOUCH-AREA"})
    from ..case.site import shapely_polygon
    for z in r.case.surface_zones:
        for ring in _polygon_rings(shapely_polygon(z.area)):
            msp.add_lwpolyline(ring, close=True, dxfattribs={"layer": "GRD-ZONES"})
        x, y = shapely_polygon(z.area).representative_point().coords[0]
        msp.add_text(z.name, height=1.0, dxfattribs={"layer": "GRD-ZONES"}).set_placement((x, y))
    for k, (x, y) in enumerate(r.case.probes, start=1):
        msp.add_point((x, y), dxfattribs={"layer": "GRD-PROBES"})
        msp.add_text(f"P{k}", height=0.8, dxfattribs={"layer": "GRD-PROBES"}).set_placement((x + 0.5, y + 0.5))
    for level, lines in r.contours:
        for line in lines:
            msp.add_lwpolyline(line.tolist(), dxfattribs={"layer": "GRD-CONTOURS"})
        if lines:
            x, y = lines[0][0]
            msp.add_text(f"{level:,.0f} V", height=0.8, dxfattribs={"layer": "GRD-CONTOURS"}).set_placement((x, y))
    # the maps drawn are the case as written: its own limits and worst points go with them (not a scenario's)
    full, r = r, (r.scenarios[0] if r.scenarios else r)
    # touch-limit contour: where the touch voltage equals the local tolerable limit
    s = r.surface
    local, _ = r.local_limits()
    excess = np.where(np.isnan(s.touch), -local, s.touch - local)
    limit_lines = contour_lines(s.x, s.y, excess, [0.0])[0] if np.nanmax(excess) > 0 else []
    for line in limit_lines:
        msp.add_lwpolyline(line.tolist(), dxfattribs={"layer": "GRD-TOUCH-LIMIT"})
    if limit_lines:
        x, y = limit_lines[0][0]
        msp.add_text(f"touch limit {r.tolerable_touch:,.0f} V" if len(r.zones) == 1 else "touch limit (per zone)",
                     height=0.8, dxfattribs={"layer": "GRD-TOUCH-LIMIT"}).set_placement((x, y))
    for name, check in (("touch", r.touch_check), ("step", r.step_check), ("mesh", r.mesh_check)):
        if check.worst is not None:
            w = check.worst
            msp.add_point((w.x, w.y), dxfattribs={"layer": "GRD-WORST"})
            own = f" ({r.scenario})" if full.scenarios else ""
            msp.add_text(f"worst {name} {w.value:,.0f} V{own}", height=0.8,
                         dxfattribs={"layer": "GRD-WORST"}).set_placement((w.x + 0.5, w.y - 1.0))
    buf = io.StringIO()
    doc.write(buf)
    return buf.getvalue().encode("utf-8")
