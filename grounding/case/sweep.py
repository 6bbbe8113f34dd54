"""The ``sweep`` block of a case file: settings, their values and how one is applied to the case document."""

from __future__ import annotations

import copy
import math
from typing import Any

from .document import Document, as_number, fmt

# ---- sweeps ---------------------------------------------------------------------------------------

#: Shorthand sweep names and the case key paths they stand for.
SWEEP_SHORTHANDS = {
    "grid.meshes": "electrodes.grids[*].meshes",
    "grid.depth": "electrodes.grids[*].depth",
    "grid.diameter": "electrodes.grids[*].diameter",
    "rods.length": "electrodes.rods[*].length",
    "rods.diameter": "electrodes.rods[*].diameter",
}
#: Sweep names computed rather than set: mesh spacing (m) of every grid, rod layout on the first grid.
SWEEP_SPECIAL = ("grid.spacing", "rods.layout", "rods.count")
ROD_LAYOUTS = ("none", "corners", "perimeter")
#: Rod length and diameter used by rods.layout when the case has no rods, m.
DEFAULT_ROD = (3.0, 0.016)


def sweep_settings(doc: "Document") -> list[tuple[str, list[tuple[str, Any]]]]:
    """The sweep block as (name, [(label, value), ...]) in file order, validated."""
    data = doc.data.get("sweep")
    if not isinstance(data, dict) or not data:
        raise doc.fail("sweep", "must map parameter names to lists or ranges of values")
    out = []
    for name, values in data.items():
        path = f"sweep.{name}"
        if not isinstance(name, str) or not name.strip():
            raise doc.fail("sweep", f"has a setting named {fmt(name)}: name the case value to vary, e.g. "
                                    "grid.spacing, grid.depth, rods.layout, surface_layer.thickness or soil")
        if name == "soil":
            if not isinstance(values, dict) or not values:
                raise doc.fail(path, "must map scenario names to soil blocks, e.g. {dry: {resistivity: 400}}")
            out.append((name, [(str(k), v) for k, v in values.items()]))
            continue
        if isinstance(values, dict):
            allowed = {"from", "to", "step", "count"}
            extra = set(values) - allowed
            if extra or not {"from", "to"} <= set(values) or ("step" in values) == ("count" in values):
                raise doc.fail(path, "a range needs from, to and either step or count")
            a, b = as_number(values["from"]), as_number(values["to"])
            if not all(isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) for x in (a, b)):
                raise doc.fail(path, "range bounds must be finite numbers")
            if "step" in values:
                step = as_number(values["step"])
                if isinstance(step, bool) or not isinstance(step, (int, float)) or not math.isfinite(step) or step <= 0:
                    raise doc.fail(f"{path}.step", f"must be a number > 0, got {fmt(step)}")
                count = (b - a) / step + 1
                if not math.isfinite(count) or count > MAX_VARIANTS:
                    raise doc.fail(f"{path}.step", f"= {step:g} makes more than {MAX_VARIANTS:,} values from {a:g} to "
                                                   f"{b:g}; use a larger step")
                n = int(math.floor((b - a) / step + 1e-9)) + 1
                if n < 1:
                    raise doc.fail(path, "is empty: 'to' is below 'from'")
                vals = [round(a + i * step, 12) for i in range(n)]
            else:
                n = values["count"]
                if isinstance(n, bool) or not isinstance(n, int) or n < 1 or n > MAX_VARIANTS:
                    raise doc.fail(f"{path}.count", f"must be a whole number from 1 to {MAX_VARIANTS:,}, got {fmt(n)}")
                vals = [a] if n == 1 else [round(a + (b - a) * i / (n - 1), 12) for i in range(n)]
        elif isinstance(values, list) and values:
            vals = [as_number(v) for v in values]          # 12e3 / 1e-3 without a dot are text in YAML 1.1
        else:
            raise doc.fail(path, "must be a non-empty list of values or a range {from, to, step|count}")
        if name == "rods.layout":
            for v in vals:
                if v not in ROD_LAYOUTS:
                    raise doc.fail(path, f"values must be one of {', '.join(ROD_LAYOUTS)}, got {fmt(v)}")
        if name in ("grid.spacing", "grid.depth", "grid.diameter", "rods.length", "rods.diameter"):
            for v in vals:
                if isinstance(v, bool) or not isinstance(v, (int, float)) or v <= 0:
                    raise doc.fail(path, f"values must be numbers > 0 (m), got {fmt(v)}")
        if name == "rods.count":
            for v in vals:
                if isinstance(v, bool) or not isinstance(v, int) or v < 0:
                    raise doc.fail(path, f"values must be whole numbers >= 0, got {fmt(v)}")
        out.append((str(name), [(_label(v), v) for v in vals]))
    if math.prod(len(v) for _, v in out) > MAX_VARIANTS:
        raise doc.fail("sweep", f"gives {math.prod(len(v) for _, v in out)} combinations; at most {MAX_VARIANTS}")
    return out


#: Most combinations a sweep may give.
MAX_VARIANTS = 2000


def _label(v: Any) -> str:
    if isinstance(v, float):
        return f"{v:g}"
    return str(v).replace("'", "")


def _path_parts(path: str) -> list:
    parts = []
    for token in path.split("."):
        while "[" in token:
            head, rest = token.split("[", 1)
            if head:
                parts.append(head)
            idx, token = rest.split("]", 1)
            parts.append("*" if idx == "*" else int(idx))
        if token:
            parts.append(token)
    return parts


def _assign(node: Any, parts: list, value: Any, where: str) -> None:
    head, rest = parts[0], parts[1:]
    if head == "*":
        if not isinstance(node, list) or not node:
            raise ValueError(f"{where}: there is no list to apply [*] to")
        for i in range(len(node)):
            if rest:
                _assign(node[i], rest, value, where)
            else:
                node[i] = copy.deepcopy(value)
        return
    if isinstance(head, int):
        if not isinstance(node, list) or head >= len(node):
            raise ValueError(f"{where}: index [{head}] is not in the case")
        if rest:
            _assign(node[head], rest, value, where)
        else:
            node[head] = copy.deepcopy(value)
        return
    if not isinstance(node, dict):
        raise ValueError(f"{where}: '{head}' is not in the case")
    if rest:
        if head not in node or node[head] is None:
            raise ValueError(f"{where}: the case has no '{head}' to vary")
        _assign(node[head], rest, value, where)
    else:
        node[head] = copy.deepcopy(value)


def _perimeter_nodes(g: dict) -> list[tuple[float, float]]:
    """Nodes on a grid's perimeter in order around it, starting at the origin corner."""
    (ox, oy), (lx, ly), (nx, ny) = g["origin"], g["size"], g["meshes"]
    xs = [ox + lx * i / nx for i in range(nx + 1)]
    ys = [oy + ly * j / ny for j in range(ny + 1)]
    ring = [(x, ys[0]) for x in xs] + [(xs[-1], y) for y in ys[1:]] + \
        [(x, ys[-1]) for x in reversed(xs[:-1])] + [(xs[0], y) for y in reversed(ys[1:-1])]
    return ring


def _rod_layout(data: dict, layout, where: str) -> None:
    el = data.get("electrodes") or {}
    grids = el.get("grids") or []
    if not grids:
        raise ValueError(f"{where}: rods.layout places rods on the first grid; the case has no grid")
    rods = el.get("rods") or []
    length, diameter = (rods[0].get("length", DEFAULT_ROD[0]), rods[0].get("diameter", DEFAULT_ROD[1])) \
        if rods and isinstance(rods[0], dict) else DEFAULT_ROD
    g = grids[0]
    (ox, oy), (lx, ly), depth = g["origin"], g["size"], g["depth"]
    corners = [(ox, oy), (ox + lx, oy), (ox + lx, oy + ly), (ox, oy + ly)]
    if isinstance(layout, int):                    # rods.count: corners first, then evenly round the perimeter
        ring = _perimeter_nodes(g)
        if layout > len(ring):
            raise ValueError(f"{where}: {layout} rods do not fit on the {len(ring)} perimeter nodes of the grid")
        if layout <= 4:
            tops = corners[:layout] if layout != 2 else [corners[0], corners[2]]
        else:
            rest = [p for p in ring if p not in corners]
            extra = layout - 4
            picks = [rest[int(round((k + 0.5) * len(rest) / extra - 0.5))] for k in range(extra)]
            tops = corners + picks
    elif layout == "none":
        tops = []
    elif layout == "corners":
        tops = corners
    else:
        tops = _perimeter_nodes(g)
    el["rods"] = [{"top": [float(x), float(y), float(depth)], "length": length, "diameter": diameter}
                  for x, y in tops]
    data["electrodes"] = el


def apply_setting(data: dict, name: str, value: Any, where: str) -> None:
    """Apply one sweep setting (a key path or a shorthand such as grid.spacing) to a case document."""
    if name == "grid.spacing":
        for g in (data.get("electrodes") or {}).get("grids") or []:
            g["meshes"] = [max(1, math.ceil(g["size"][0] / value - 1e-9)), max(1, math.ceil(g["size"][1] / value - 1e-9))]
        return
    if name in ("rods.layout", "rods.count"):
        _rod_layout(data, value, where)
        return
    _assign(data, _path_parts(SWEEP_SHORTHANDS.get(name, name)), value, where)


def setting_order(name: str) -> int:
    """Order in which sweep settings apply (grid spacing before rods, rod layout before rod sizes)."""
    return {"grid.spacing": 0, "rods.layout": 2, "rods.count": 2, "rods.length": 3, "rods.diameter": 3}.get(
        name, 0 if name.startswith("grid.") else 1)
