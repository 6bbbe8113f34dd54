"""Electrodes read from a DXF drawing (ezdxf): lines and polylines on conductor layers become conductors,
points, circles and block inserts on rod layers become rods.

Case key ``electrodes.drawing: {file, conductor_layers, rod_layers, depth, diameter, rod_length,
rod_diameter, units}``. Coordinates are scaled from the drawing's units (``m`` or ``mm``, checked against
the drawing's $INSUNITS when it has one). Entities drawn flat (z = 0) lie at ``depth``; entities with
a z take depth = −z (a CAD elevation below ground). Entities on other layers are counted in a note.
"""

from __future__ import annotations

import hashlib
import math
from pathlib import Path
from typing import Any

from .document import Checks, fmt
from .model import Conductor, Rod

#: $INSUNITS codes of the units a drawing may be in, and metres per unit.
INSUNITS = {"mm": 4, "cm": 5, "m": 6, "in": 1, "ft": 2}
METRES_PER_UNIT = {"mm": 0.001, "cm": 0.01, "m": 1.0, "in": 0.0254, "ft": 0.3048}
#: Largest coordinate accepted from a drawing, m (as for case files).
MAX_COORDINATE = 1e4
#: Entity types read on conductor layers, and those refused there (curves: approximate them by chords).
CONDUCTOR_TYPES = ("LINE", "LWPOLYLINE", "POLYLINE")
CURVE_TYPES = ("ARC", "CIRCLE", "SPLINE", "ELLIPSE")
ROD_TYPES = ("POINT", "CIRCLE", "INSERT")


class DrawingSections(Checks):
    """Reader of the ``electrodes.drawing`` block."""

    def drawing(self, value: Any) -> tuple[tuple[Conductor, ...], tuple[Rod, ...], tuple[str, str], list[str]]:
        """Conductors, rods, (file, SHA-256) and notes from the drawing block."""
        p = "electrodes.drawing"
        m = self.mapping(p, value, ("file", "conductor_layers", "rod_layers", "depth", "diameter", "rod_length",
                                    "rod_diameter", "units"), ("file",))
        name = m["file"]
        if not isinstance(name, str) or not name:
            raise self.doc.fail(f"{p}.file", "must be the path of a DXF file (relative to the case file)")
        full = Path(self.doc.file).parent / name
        if not full.is_file():
            raise self.doc.fail(f"{p}.file", f"file '{full}' not found (the path is relative to the case file)")
        units = m.get("units", "m")
        if units not in INSUNITS:
            raise self.doc.fail(f"{p}.units", f"must be one of {', '.join(INSUNITS)} (the drawing's length unit), "
                                              f"got {fmt(units)}")
        scale = METRES_PER_UNIT[units]
        conductor_layers = [self.name(f"{p}.conductor_layers[{i}]", v)
                            for i, v in enumerate(self.sequence(f"{p}.conductor_layers", m.get("conductor_layers")))]
        rod_layers = [self.name(f"{p}.rod_layers[{i}]", v)
                      for i, v in enumerate(self.sequence(f"{p}.rod_layers", m.get("rod_layers")))]
        if not conductor_layers and not rod_layers:
            raise self.doc.fail(p, "names no conductor_layers and no rod_layers; list the layers to read")
        data = full.read_bytes()
        sha = hashlib.sha256(data).hexdigest()
        try:
            import ezdxf

            doc = ezdxf.readfile(str(full))
        except Exception as exc:                 # ezdxf raises its own errors for unreadable files
            raise self.doc.fail(f"{p}.file", f"'{full}' is not a readable DXF drawing ({type(exc).__name__}: "
                                             f"{str(exc).splitlines()[0] if str(exc) else 'no detail'})") from None
        code = doc.header.get("$INSUNITS", 0)
        if code and code != INSUNITS[units]:
            other = next((k for k, v in INSUNITS.items() if v == code), None)
            raise self.doc.fail(f"{p}.units", f"is {units} but the drawing says its units are "
                                              + (f"{other} ($INSUNITS {code}); give units: {other}" if other else
                                                 f"code {code} ($INSUNITS), none of {', '.join(INSUNITS)}; save the "
                                                 "drawing in one of them"))
        # layer names are case-insensitive in DXF
        present = {layer.dxf.name.casefold(): layer.dxf.name for layer in doc.layers}
        for key, layers in (("conductor_layers", conductor_layers), ("rod_layers", rod_layers)):
            for i, layer in enumerate(layers):
                if layer.casefold() not in present:
                    raise self.doc.fail(f"{p}.{key}[{i}]", f"layer '{layer}' is not in {full}; its layers: "
                                                           f"{', '.join(sorted(present.values()))}")
        layer_names = conductor_layers + rod_layers
        conductor_layers = [x.casefold() for x in conductor_layers]
        rod_layers = [x.casefold() for x in rod_layers]
        msp = doc.modelspace()

        def z_depth(z: float, handle: str, need: str) -> float:
            if not math.isfinite(z) or abs(z * scale) > MAX_COORDINATE:
                raise self.doc.fail(p, f"{need} {handle} has z = {z:g} {units}, beyond ±{MAX_COORDINATE:g} m; check the "
                                       "entity and the drawing's units")
            if abs(z) < 1e-12:
                if "depth" not in m:
                    raise self.doc.fail(f"{p}.depth", f"is needed: {need} {handle} is drawn flat (z = 0)")
                return self.depth(f"{p}.depth", self.number(f"{p}.depth", m["depth"], "m"))
            if -z * scale <= 0:
                raise self.doc.fail(p, f"{need} {handle} has z = {z:g}: above ground; draw buried metal at negative "
                                       "z (elevation) or flat with a depth")
            return -z * scale

        conductors, rods, skipped = [], [], 0
        if conductor_layers:
            if "diameter" not in m:
                raise self.doc.fail(p, "needs diameter (m) for the conductors on the conductor layers")
            d = self.diameter(f"{p}.diameter", m["diameter"])
        if rod_layers:
            for k in ("rod_length", "rod_diameter"):
                if k not in m:
                    raise self.doc.fail(p, f"needs {k} (m) for the rods on the rod layers")
            rod_len = self.number(f"{p}.rod_length", m["rod_length"], "m", gt=0)
            rod_d = self.diameter(f"{p}.rod_diameter", m["rod_diameter"])
            self.long_enough(f"{p}.rod_length", rod_len, rod_d)

        def plan(x: float, y: float, kind: str, handle: str, layer: str) -> tuple[float, float]:
            for v in (x, y):
                if not math.isfinite(v) or abs(v * scale) > MAX_COORDINATE:
                    raise self.doc.fail(p, f"{kind} {handle} on layer '{layer}' has the coordinate {v:g} {units}, "
                                           f"beyond ±{MAX_COORDINATE:g} m; check the entity and the drawing's units")
            return x * scale, y * scale

        for e in msp:
            kind, handle = e.dxftype(), f"#{e.dxf.handle}"
            layer = e.dxf.layer.casefold()
            if layer in conductor_layers:
                if kind in CURVE_TYPES:
                    raise self.doc.fail(p, f"layer '{e.dxf.layer}' holds {'an' if kind[0] in 'AEIOU' else 'a'} {kind} ({handle}); approximate curves by straight "
                                           "chords in the drawing (conductors are straight lines)")
                if kind not in CONDUCTOR_TYPES:
                    skipped += 1
                    continue
                if kind == "LINE":
                    pts = [tuple(e.dxf.start), tuple(e.dxf.end)]
                elif kind == "LWPOLYLINE":
                    if any(abs(b) > 1e-12 for *_, b in e.get_points("xyb")):
                        raise self.doc.fail(p, f"layer '{e.dxf.layer}' holds an LWPOLYLINE with arc segments (bulges) "
                                               f"({handle}); approximate the arcs by straight chords in the drawing")
                    elevation = e.dxf.elevation if e.dxf.hasattr("elevation") else 0.0
                    pts = [(x, y, elevation) for x, y in e.get_points("xy")]
                    if e.closed:
                        pts.append(pts[0])
                else:
                    if not (e.is_2d_polyline or e.is_3d_polyline):
                        raise self.doc.fail(p, f"layer '{e.dxf.layer}' holds a POLYLINE that is a mesh or polyface "
                                               f"({handle}); draw conductors as lines or plain polylines")
                    if any(abs(v.dxf.bulge) > 1e-12 for v in e.vertices if v.dxf.hasattr("bulge")):
                        raise self.doc.fail(p, f"layer '{e.dxf.layer}' holds a POLYLINE with arc segments (bulges) "
                                               f"({handle}); approximate the arcs by straight chords in the drawing")
                    pts = [tuple(v.dxf.location) for v in e.vertices]
                    if e.is_closed:
                        pts.append(pts[0])
                for a, b in zip(pts[:-1], pts[1:]):
                    start = (*plan(a[0], a[1], kind, handle, e.dxf.layer), z_depth(a[2], handle, "conductor"))
                    end = (*plan(b[0], b[1], kind, handle, e.dxf.layer), z_depth(b[2], handle, "conductor"))
                    self.long_enough(p, math.dist(start, end), d, f"a piece of {kind} {handle} on layer "
                                                                    f"'{e.dxf.layer}' ")
                    conductors.append(Conductor(start, end, d, key=f"{p}[{handle}]"))
            elif layer in rod_layers:
                if kind not in ROD_TYPES:
                    skipped += 1
                    continue
                at = e.dxf.location if kind == "POINT" else e.dxf.center if kind == "CIRCLE" else e.dxf.insert
                zr = at[2]
                if not math.isfinite(zr) or abs(zr * scale) > MAX_COORDINATE:
                    raise self.doc.fail(p, f"rod {handle} on layer '{e.dxf.layer}' has z = {zr:g} {units}, beyond "
                                           f"±{MAX_COORDINATE:g} m; check the entity and the drawing's units")
                if zr > 1e-12:
                    raise self.doc.fail(p, f"rod {handle} on layer '{e.dxf.layer}' is above ground (z = {zr:g})")
                top = (*plan(at[0], at[1], kind, handle, e.dxf.layer), 0.0 if abs(zr) < 1e-12 else -zr * scale)
                if abs(at[2]) < 1e-12 and "depth" in m:
                    top = (top[0], top[1], self.number(f"{p}.depth", m["depth"], "m", gt=0))
                rods.append(Rod(top, rod_len, rod_d, key=f"{p}[{handle}]"))
            else:
                skipped += 1
        if not conductors and not rods:
            raise self.doc.fail(p, f"found no conductors or rods on the layers {', '.join(layer_names)} "
                                   f"of {full}")
        notes = [f"drawing {name} (sha256 {sha[:16]}…): {len(conductors)} conductor piece(s), {len(rods)} rod(s) read"
                 + (f"; {skipped} entit{'y' if skipped == 1 else 'ies'} on other layers or of other kinds ignored"
                    if skipped else "")]
        return tuple(conductors), tuple(rods), (str(full), sha), notes
