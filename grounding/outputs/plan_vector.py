"""The electrode plan as a vector drawing at a stated scale (reportlab graphics): printed at 100 % on the
report's page, 1 m on site is exactly 1000/n mm on paper for the scale 1:n given under it."""

from __future__ import annotations

import numpy as np
from reportlab.graphics.shapes import Circle, Drawing, Line, Polygon, PolyLine, Rect, String
from reportlab.lib import colors
from reportlab.lib.units import mm

from ..study.result import StudyResult
from .figures import SEPARATE_STYLE

#: Scales offered, 1:n (the common drawing scales of site plans).
SCALES = (50, 100, 200, 250, 500, 1000, 1250, 2000, 2500, 5000, 10000, 20000, 25000, 50000)
CONDUCTOR = colors.HexColor("#1f3b73")
PROBE = colors.HexColor("#b35806")
DASHES = {"floating": [5, 2], "remote": [6, 2, 1, 2], "bonded": [1, 1.5]}


def plan_scale(extent_m: tuple[float, float], width_pt: float, height_pt: float) -> int:
    """The largest standard scale 1:n at which an extent (m, m) fits in the given space (points)."""
    for n in SCALES:
        if extent_m[0] * 1000 / n * mm <= width_pt and extent_m[1] * 1000 / n * mm <= height_pt:
            return n
    return SCALES[-1]


def plan_drawing(r: StudyResult, width_pt: float, height_pt: float) -> tuple[Drawing, int]:
    """The plan (conductors, rods, separate electrodes, zones, probes, scale bar, north arrow) at the largest
    standard scale that fits ``width_pt`` × ``height_pt``; returns the drawing and n of the scale 1:n."""
    c = r.segments.conductors
    zones = [np.array(z.area.shell) for z in r.case.surface_zones]
    pts = np.vstack([c.start[:, :2], c.end[:, :2]] + zones + ([np.array(r.case.probes)] if r.case.probes else []))
    lo, hi = pts.min(axis=0), pts.max(axis=0)
    margin_pt = 14 * mm                                     # room for the scale bar and labels
    n = plan_scale((max(hi[0] - lo[0], 1e-3), max(hi[1] - lo[1], 1e-3)), width_pt - margin_pt,
                   height_pt - margin_pt)
    k = 1000.0 / n * mm                                     # points per metre on paper
    w = (hi[0] - lo[0]) * k + margin_pt
    h = (hi[1] - lo[1]) * k + margin_pt
    d = Drawing(w, h)
    ox, oy = margin_pt / 2, margin_pt / 2 + 4 * mm

    def P(x, y):
        return ox + (x - lo[0]) * k, oy + (y - lo[1]) * k - 4 * mm

    for z in r.case.surface_zones:
        for ring in [z.area.shell] + list(z.area.holes):
            flat = [v for p in ring for v in P(*p)]
            d.add(Polygon(flat, strokeColor=colors.HexColor("#7f7f7f"), strokeWidth=0.5, fillColor=None,
                          strokeDashArray=[4, 2]))
    own = np.zeros(len(c.keys), bool)
    styles = []
    for e in r.case.separate_electrodes:
        mask = c.matching((e.key,))
        own |= mask
        styles.append((e.connection, mask))
    for j in np.flatnonzero(~c.is_rod & ~own):
        (x0, y0), (x1, y1) = P(*c.start[j, :2]), P(*c.end[j, :2])
        d.add(Line(x0, y0, x1, y1, strokeColor=CONDUCTOR, strokeWidth=1.0))
    for kind, mask in styles:
        color = colors.HexColor(SEPARATE_STYLE[kind]["color"])
        for j in np.flatnonzero(~c.is_rod & mask):
            (x0, y0), (x1, y1) = P(*c.start[j, :2]), P(*c.end[j, :2])
            d.add(Line(x0, y0, x1, y1, strokeColor=color, strokeWidth=1.2, strokeDashArray=DASHES[kind]))
        for j in np.flatnonzero(c.is_rod & mask):
            x, y = P(*c.start[j, :2])
            d.add(Rect(x - 1.6, y - 1.6, 3.2, 3.2, fillColor=color, strokeColor=colors.black, strokeWidth=0.3))
    for j in np.flatnonzero(c.is_rod & ~own):
        x, y = P(*c.start[j, :2])
        d.add(Circle(x, y, 1.8, fillColor=CONDUCTOR, strokeColor=colors.black, strokeWidth=0.3))
    for i, (px, py) in enumerate(r.case.probes, start=1):
        x, y = P(px, py)
        d.add(Polygon([x - 2.2, y - 1.6, x + 2.2, y - 1.6, x, y + 2.2], fillColor=PROBE, strokeColor=None))
        d.add(String(x + 3, y - 5, f"P{i}", fontSize=6, fillColor=PROBE))
    # scale bar (a round length near a fifth of the drawing) and north arrow
    bar_m = _round_length((hi[0] - lo[0]) / 5)
    bx, by = ox, 3 * mm
    d.add(Line(bx, by, bx + bar_m * k, by, strokeColor=colors.black, strokeWidth=2.5))
    d.add(String(bx + bar_m * k + 3, by - 2.5, f"{bar_m:g} m   scale 1:{n:,} at 100 % on A4".replace(",", " "),
                 fontSize=7))
    nx, ny = w - 6 * mm, h - 10 * mm
    d.add(PolyLine([nx, ny, nx, ny + 7 * mm], strokeColor=colors.black, strokeWidth=1))
    d.add(Polygon([nx - 2, ny + 5 * mm, nx + 2, ny + 5 * mm, nx, ny + 7.5 * mm], fillColor=colors.black))
    d.add(String(nx - 2.5, ny + 8 * mm, "N", fontSize=8))
    return d, n


def _round_length(x: float) -> float:
    """1, 2 or 5 × 10^k at or below x (m)."""
    if x <= 0:
        return 1.0
    e = 10 ** np.floor(np.log10(x))
    return float(max(m for m in (1, 2, 5) if m * e <= x) * e)
