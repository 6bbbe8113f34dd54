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

from .case import Conductor, Rod
from .case_checks import Checks, fmt

#: $INSUNITS codes of the units a drawing may be in.
INSUNITS = {"mm": 4, "m": 6}
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
            raise self.doc.fail(f"{p}.units", f"must be m or mm, got {fmt(units)}")
        scale = 0.001 if units == "mm" else 1.0
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
        if code and code in INSUNITS.values() and code != INSUNITS[units]:
            other = next(k for k, v in INSUNITS.items() if v == code)
            raise self.doc.fail(f"{p}.units", f"is {units} but the drawing says its units are {other} ($INSUNITS "
                                              f"{code}); give units: {other}")
        present = {layer.dxf.name for layer in doc.layers}
        for key, layers in (("conductor_layers", conductor_layers), ("rod_layers", rod_layers)):
            for i, layer in enumerate(layers):
                if layer not in present:
                    raise self.doc.fail(f"{p}.{key}[{i}]", f"layer '{layer}' is not in {full}; its layers: "
                                                           f"{', '.join(sorted(present))}")
        msp = doc.modelspace()

        def z_depth(z: float, handle: str, need: str) -> float:
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
        for e in msp:
            layer, kind, handle = e.dxf.layer, e.dxftype(), f"#{e.dxf.handle}"
            if layer in conductor_layers:
                if kind in CURVE_TYPES:
                    raise self.doc.fail(p, f"layer '{layer}' holds a {kind} ({handle}); approximate curves by straight "
                                           "chords in the drawing (conductors are straight lines)")
                if kind not in CONDUCTOR_TYPES:
                    skipped += 1
                    continue
                if kind == "LINE":
                    pts = [tuple(e.dxf.start), tuple(e.dxf.end)]
                elif kind == "LWPOLYLINE":
                    elevation = e.dxf.elevation if e.dxf.hasattr("elevation") else 0.0
                    pts = [(x, y, elevation) for x, y in e.get_points("xy")]
                    if e.closed:
                        pts.append(pts[0])
                else:
                    pts = [tuple(v.dxf.location) for v in e.vertices]
                    if e.is_closed:
                        pts.append(pts[0])
                for a, b in zip(pts[:-1], pts[1:]):
                    start = (a[0] * scale, a[1] * scale, z_depth(a[2], handle, "conductor"))
                    end = (b[0] * scale, b[1] * scale, z_depth(b[2], handle, "conductor"))
                    if math.dist(start, end) <= 1e-6:
                        raise self.doc.fail(p, f"layer '{layer}' holds a zero-length piece ({kind} {handle}); "
                                               "remove it from the drawing")
                    conductors.append(Conductor(start, end, d, key=f"{p}[{handle}]"))
            elif layer in rod_layers:
                if kind not in ROD_TYPES:
                    skipped += 1
                    continue
                at = e.dxf.location if kind == "POINT" else e.dxf.center if kind == "CIRCLE" else e.dxf.insert
                top = (at[0] * scale, at[1] * scale, 0.0 if abs(at[2]) < 1e-12 else -at[2] * scale)
                if top[2] < 0:
                    raise self.doc.fail(p, f"rod {handle} on layer '{layer}' is above ground (z = {at[2]:g})")
                if abs(at[2]) < 1e-12 and "depth" in m:
                    top = (top[0], top[1], self.number(f"{p}.depth", m["depth"], "m", gt=0))
                rods.append(Rod(top, rod_len, rod_d, key=f"{p}[{handle}]"))
            else:
                skipped += 1
        if not conductors and not rods:
            raise self.doc.fail(p, f"found no conductors or rods on the layers {', '.join(conductor_layers + rod_layers)} "
                                   f"of {full}")
        notes = [f"drawing {name} (sha256 {sha[:16]}…): {len(conductors)} conductor piece(s), {len(rods)} rod(s) read"
                 + (f"; {skipped} entit{'y' if skipped == 1 else 'ies'} on other layers or of other kinds ignored"
                    if skipped else "")]
        return tuple(conductors), tuple(rods), (str(full), sha), notes
