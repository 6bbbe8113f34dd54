"""An invented collector-substation yard for the study benchmarks (demo data, not a real site).

An irregular yard of about 170 m × 120 m with a chamfered north-east corner, 10 m meshes and 5 m meshes at two
transformer bays, 33 rods of 6 m, soil fitted from a synthetic Wenner sounding of a three-layer earth, crushed
rock inside the fence only, a floating chain-link fence (bottom wire and 115 posts) 2 m outside the grid, a
fire-water main tied to remote earth, four scenarios (as measured; a dry season with another soil; wet rock;
a future fault level) and both IEEE Std 80 and EN 50522.

``write_yard(folder, plain=False)`` writes ``yard.yaml`` (and its readings file) and returns the case path;
``plain=True`` writes the same grid and rods alone: no scenarios, no separate metal, the fitted soil written
out as layers, one standard — the reference a full study is compared with.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from shapely.geometry import LineString, Polygon

#: The yard outline (m): a rectangle with its north-east corner cut off.
OUTLINE = [(0, 0), (170, 0), (170, 90), (140, 120), (0, 120)]
#: Transformer bays with 5 m meshes: (x0, y0, x1, y1), m.
BAYS = [(40, 40, 60, 60), (100, 40, 120, 60)]
#: The three-layer earth the synthetic sounding is drawn from (Ω·m, m); invented.
EARTH = ([350.0, 90.0, 600.0], [1.5, 8.0])
DEPTH, DIAMETER = 0.6, 0.0124
PLAIN_LAYERS = "[{resistivity: %.6g, thickness: %.6g}, {resistivity: %.6g, thickness: %.6g}, {resistivity: %.6g}]"


def grid_lines() -> list[tuple[tuple[float, float], tuple[float, float]]]:
    """Grid conductors (plan, m) clipped to the outline: 10 m meshes, 5 m inside the bays."""
    outline = Polygon(OUTLINE)
    lines = []
    for x in range(0, 171, 10):
        lines.append(LineString([(x, -1), (x, 121)]))
    for y in range(0, 121, 10):
        lines.append(LineString([(-1, y), (171, y)]))
    for x0, y0, x1, y1 in BAYS:
        lines += [LineString([(x, y0), (x, y1)]) for x in np.arange(x0 + 5, x1, 10)]
        lines += [LineString([(x0, y), (x1, y)]) for y in np.arange(y0 + 5, y1, 10)]
    out = []
    for line in lines:
        piece = line.intersection(outline)
        if piece.length > 0:
            (a, b) = list(piece.coords)[0], list(piece.coords)[-1]
            out.append(((round(a[0], 6), round(a[1], 6)), (round(b[0], 6), round(b[1], 6))))
    out.append(((170, 90), (140, 120)))          # the chamfer's own edge
    return out


def rods() -> list[tuple[float, float]]:
    """33 rod positions (m): the outline's corners, then every 20 m along the perimeter, then the bays' corners."""
    ring = LineString(OUTLINE + [OUTLINE[0]])
    points = [tuple(p) for p in OUTLINE]
    for s in np.arange(20.0, ring.length, 20.0):
        p = ring.interpolate(s)
        points.append((round(p.x, 3), round(p.y, 3)))
    for x0, y0, x1, y1 in BAYS:
        points += [(x0, y0), (x1, y1)]
    unique = []
    for p in points:
        if all(np.hypot(p[0] - q[0], p[1] - q[1]) > 1 for q in unique):
            unique.append(p)
    return unique[:33]


def fence() -> tuple[list, list]:
    """Fence bottom-wire pieces and 115 post positions, 2 m outside the outline (m)."""
    ring = Polygon(OUTLINE).buffer(2.0, join_style=2).exterior
    coords = list(ring.coords)
    wires = [(coords[i], coords[i + 1]) for i in range(len(coords) - 1)]
    posts = [ring.interpolate(s) for s in np.linspace(0, ring.length, 115, endpoint=False)]
    return wires, [(p.x, p.y) for p in posts]


def readings() -> str:
    """A synthetic Wenner sounding of EARTH with 3 % multiplicative noise (fixed seed)."""
    from grounding.sounding.forward import wenner
    spacing = np.geomspace(0.5, 60, 16)
    rho = wenner(spacing, *EARTH) * (1 + 0.03 * np.random.default_rng(7).standard_normal(spacing.size))
    resistance = rho / (2 * np.pi * spacing)
    rows = "\n".join(f"north,{a:.4g},{r:.5g},0.05" for a, r in zip(spacing, resistance))
    return "# synthetic sounding of an invented three-layer earth (benchmark data)\ntraverse,spacing,resistance,probe_depth\n" + rows + "\n"


def write_yard(folder: Path, plain: bool = False, rock: float = 3000.0, name: str | None = None) -> Path:
    """Write the yard case into ``folder`` and return its path (see the module docstring)."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "yard-wenner.csv").write_text(readings())
    conductors = "\n".join(f"    - {{start: [{a[0]}, {a[1]}, {DEPTH}], end: [{b[0]}, {b[1]}, {DEPTH}], diameter: {DIAMETER}}}"
                           for a, b in grid_lines())
    rod_text = "\n".join(f"    - {{top: [{x}, {y}, {DEPTH}], length: 6.0, diameter: 0.016}}" for x, y in rods())
    if plain:
        from grounding.case.load import load_case
        full = load_case(write_yard(folder, name="yard-for-plain.yaml"))
        layers = full.soil.layers
        soil = "soil:\n  layers: " + PLAIN_LAYERS % (layers[0].resistivity, layers[0].thickness, layers[1].resistivity,
                                                    layers[1].thickness, layers[2].resistivity)
    else:
        soil = "soil:\n  readings: yard-wenner.csv\n  array: wenner\n  layers: 3\n  traverse: north"
    fence_wires, posts = fence()
    rock_polygon = [list(map(float, p)) for p in Polygon(OUTLINE).buffer(2.0, join_style=2).exterior.coords[:-1]]
    text = f"""\
# An invented 275/33 kV collector substation (benchmark data, not a real site).
format: 1
title: Benchmark yard{' (plain)' if plain else ''}
site: invented
{soil}
surface_zones:
  - name: yard rock
    polygon: {rock_polygon}
    resistivity: {rock}
    thickness: 0.1
fault:
  current: 20000
  split_factor: 0.5
  x_over_r: 12
  frequency: 50
  clearing_time: 0.5
criteria:
  body_weight: 70
"""
    if not plain:
        text += "  standard: [ieee80, en50522]\n"
    text += f"""\
electrodes:
  material: copper-annealed
  conductors:
{conductors}
  rods:
{rod_text}
discretization:
  max_segment: 1.0
surface:
  margin: 6.0
  resolution: 1.0
"""
    if not plain:
        wires = "\n".join(f"      - {{start: [{a[0]!r}, {a[1]!r}, 0.3], end: [{b[0]!r}, {b[1]!r}, 0.3], diameter: 0.01}}"
                          for a, b in fence_wires)
        post_text = "\n".join(f"      - {{top: [{x!r}, {y!r}, 0.0], length: 1.0, diameter: 0.05}}" for x, y in posts)
        text += f"""\
separate_electrodes:
  - name: fence
    connection: floating
    conductors:
{wires}
    rods:
{post_text}
  - name: fire-water main
    connection: remote
    conductors:
      - {{start: [85, -20, 1.2], end: [85, 140, 1.2], diameter: 0.2}}
scenarios:
  - name: as measured
  - name: dry season
    soil:
      layers: [{{resistivity: 1050, thickness: 1.5}}, {{resistivity: 140, thickness: 8.0}}, {{resistivity: 600}}]
  - name: wet rock
    surface_zones:
      - name: yard rock
        polygon: {rock_polygon}
        resistivity: {rock / 3:.6g}
        thickness: 0.1
  - name: future fault level
    fault: {{current: 25000}}
"""
    path = folder / (name or ("yard-plain.yaml" if plain else "yard.yaml"))
    path.write_text(text)
    return path


if __name__ == "__main__":
    import sys
    target = Path(sys.argv[1] if len(sys.argv) > 1 else ".")
    print(write_yard(target), write_yard(target, plain=True))
