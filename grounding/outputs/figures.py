"""Figures of a study, drawn from the real solution: plan, potential, touch, step and profile.

Colour maps are perceptually uniform and colour-blind-safe (viridis, cividis); every colour bar is
labelled with its unit; electrodes are overlaid on every map. +y is drawn as north.
"""

from __future__ import annotations

import io
from dataclasses import dataclass

import numpy as np
from matplotlib.figure import Figure

from ..study.result import StudyResult
from .style import new_figure
from .summary_text import probability_text

#: Figure size for a report page column, inches.
FIGSIZE = (7.0, 5.2)
DPI = 160


@dataclass(frozen=True)
class Rendered:
    """A figure with the numbers it shows, so tests can check them against the results."""

    name: str
    title: str
    figure: Figure
    shown_max: float | None = None


#: Line style of separate electrodes by connection (colour-blind-safe colours, distinct dashes).
SEPARATE_STYLE = {"floating": dict(color="#e66101", ls=(0, (5, 2)), label="separate, floating"),
                  "remote": dict(color="#5e3c99", ls=(0, (6, 2, 1, 2)), label="separate, tied to remote earth"),
                  "bonded": dict(color="#1b7837", ls=(0, (1, 1.5)), label="separate, bonded")}
#: Colour and dash of the requested potential contours, in level order.
CONTOUR_STYLES = (("#d7301f", (0, (5, 1.5))), ("#fdae61", (0, (2, 1))), ("#f4a6d7", (0, (7, 2, 1, 2))),
                  ("#ffffff", (0, (1, 1))))
#: Hatches of surface zones on the plan, in zone order.
ZONE_HATCHES = ("..", "//", "\\\\", "xx", "oo", "--", "++", "||")


def _separate_masks(r: StudyResult):
    """(connection, conductor mask) of each separate electrode."""
    c = r.segments.conductors
    return [(e.connection, c.matching((e.key,))) for e in r.case.separate_electrodes]


def _overlay_electrodes(ax, r: StudyResult, color="white", lw=1.1, legend=False):
    c = r.segments.conductors
    separate = _separate_masks(r)
    own = np.zeros(len(c.keys), bool)
    for _, mask in separate:
        own |= mask
    for k in np.flatnonzero(~c.is_rod & ~own):
        ax.plot([c.start[k, 0], c.end[k, 0]], [c.start[k, 1], c.end[k, 1]], color=color, lw=lw, solid_capstyle="butt")
    rods = c.start[c.is_rod & ~own]
    if len(rods):
        ax.plot(rods[:, 0], rods[:, 1], "o", ms=4.5, mfc=color, mec="black", mew=0.6, ls="none")
    shown = set()
    for kind, mask in separate:
        style = SEPARATE_STYLE[kind]
        for k in np.flatnonzero(~c.is_rod & mask):
            ax.plot([c.start[k, 0], c.end[k, 0]], [c.start[k, 1], c.end[k, 1]], color=style["color"], ls=style["ls"],
                    lw=lw + 0.4, label=style["label"] if legend and kind not in shown else None)
            shown.add(kind)
        pts = c.start[c.is_rod & mask]
        if len(pts):
            ax.plot(pts[:, 0], pts[:, 1], "s", ms=4, mfc=style["color"], mec="black", mew=0.5, ls="none")


def _draw_zones(ax, r: StudyResult):
    """Surface zones hatched on the plan, with their names and touch limits in the legend."""
    from matplotlib.patches import PathPatch
    from matplotlib.path import Path as MPath

    for k, (z, v) in enumerate(zip(r.case.surface_zones, r.zones)):
        rings = [z.area.shell] + list(z.area.holes)
        verts, codes = [], []
        for ring in rings:
            verts += list(ring) + [ring[0]]
            codes += [MPath.MOVETO] + [MPath.LINETO] * (len(ring) - 1) + [MPath.CLOSEPOLY]
        patch = PathPatch(MPath(verts, codes), fc="none", ec="#7f7f7f", lw=0.8, hatch=ZONE_HATCHES[k % len(ZONE_HATCHES)],
                          label=f"{z.name}: touch ≤ {v.tolerable_touch:,.0f} V" + (
                              "" if v.tolerable_step is None else f", step ≤ {v.tolerable_step:,.0f} V"),
                          zorder=0)
        ax.add_patch(patch)
    if r.case.surface_zones:
        native = r.zones[-1]
        ax.plot([], [], color="none", label=f"outside: native soil, touch ≤ {native.tolerable_touch:,.0f} V" + (
            "" if native.tolerable_step is None else f", step ≤ {native.tolerable_step:,.0f} V"))


def _frame(ax, r: StudyResult):
    s = r.surface
    ax.set_xlim(s.x[0], s.x[-1])
    ax.set_ylim(s.y[0], s.y[-1])
    ax.set_aspect("equal")
    ax.set_xlabel("x (m)")
    ax.set_ylabel("y (m)")


def _mark(ax, ext, label, color="black"):
    ax.plot([ext.x], [ext.y], marker="X", ms=9, mfc="white", mec=color, mew=1.4, ls="none", zorder=5)
    x0, x1 = ax.get_xlim()
    y0, y1 = ax.get_ylim()
    right = ext.x > (x0 + x1) / 2
    top = ext.y > (y0 + y1) / 2
    ax.annotate(label, (ext.x, ext.y), xytext=(-8 if right else 8, -12 if top else 8), textcoords="offset points",
                ha="right" if right else "left", va="top" if top else "bottom", fontsize=8, color=color,
                bbox=dict(boxstyle="round,pad=0.2", fc="white", ec=color, lw=0.6, alpha=0.9), zorder=6)


def plan_figure(r: StudyResult) -> Rendered:
    """Plan of the electrodes to scale, with dimensions, rods, probes, north arrow and scale bar."""
    fig, ax = new_figure(figsize=FIGSIZE, dpi=DPI)
    _draw_zones(ax, r)
    _overlay_electrodes(ax, r, color="#1f3b73", lw=1.4, legend=True)
    c = r.segments.conductors
    pts = np.vstack([c.start[:, :2], c.end[:, :2]] + [np.array(z.area.shell) for z in r.case.surface_zones])
    lo, hi = pts.min(axis=0), pts.max(axis=0)
    span = max(hi - lo)
    pad = 0.12 * span + 1.0
    ax.set_xlim(lo[0] - pad, hi[0] + pad)
    ax.set_ylim(lo[1] - pad, hi[1] + pad)
    ax.set_aspect("equal")
    ax.set_xlabel("x (m)")
    ax.set_ylabel("y (m)")
    # overall dimensions
    yd = lo[1] - 0.55 * pad
    ax.annotate("", (lo[0], yd), (hi[0], yd), arrowprops=dict(arrowstyle="<->", lw=0.8))
    ax.text((lo[0] + hi[0]) / 2, yd, f"{hi[0] - lo[0]:.1f} m", ha="center", va="bottom", fontsize=8,
            bbox=dict(fc="white", ec="none", pad=0.5))
    xd = lo[0] - 0.55 * pad
    ax.annotate("", (xd, lo[1]), (xd, hi[1]), arrowprops=dict(arrowstyle="<->", lw=0.8))
    ax.text(xd, (lo[1] + hi[1]) / 2, f"{hi[1] - lo[1]:.1f} m", ha="center", va="center", rotation=90,
            fontsize=8, bbox=dict(fc="white", ec="none", pad=0.5))
    for g in r.case.electrodes.grids:
        # the mesh size as a dimension under the grid's first mesh: outside the metal, so that the text
        # never crosses a conductor or a rod whatever the scale
        dx, dy = g.size[0] / g.meshes[0], g.size[1] / g.meshes[1]
        ym = lo[1] - 0.22 * pad
        ax.annotate("", (g.origin[0], ym), (g.origin[0] + dx, ym),
                    arrowprops=dict(arrowstyle="|-|,widthA=0.3,widthB=0.3", lw=0.7, color="#444444", shrinkA=0, shrinkB=0))
        ax.annotate(f"mesh {dx:.1f} × {dy:.1f} m", (g.origin[0] + dx, ym), xytext=(4, 0), textcoords="offset points",
                    ha="left", va="center", fontsize=6.5, color="#444444")
    for k, (x, y) in enumerate(r.case.probes, start=1):
        ax.plot([x], [y], marker="^", ms=6, color="#b35806", ls="none")
        ax.annotate(f"P{k}", (x, y), xytext=(4, -10), textcoords="offset points", fontsize=8, color="#b35806")
    # north arrow and scale bar in the top-right corner
    x0, x1 = ax.get_xlim()
    y0, y1 = ax.get_ylim()
    nx, ny = x1 - 0.05 * (x1 - x0), y1 - 0.2 * (y1 - y0)
    ax.annotate("N", (nx, ny + 0.12 * (y1 - y0)), (nx, ny), ha="center", fontsize=9, fontweight="bold",
                arrowprops=dict(arrowstyle="-|>", lw=1.2, color="black"))
    bar = _nice_length(0.25 * (x1 - x0))
    bx, by = x0 + 0.04 * (x1 - x0), y1 - 0.06 * (y1 - y0)
    ax.plot([bx, bx + bar], [by, by], color="black", lw=3, solid_capstyle="butt")
    ax.text(bx + bar / 2, by - 0.015 * (y1 - y0), f"{bar:g} m", ha="center", va="top", fontsize=8)
    ax.plot([], [], color="#1f3b73", lw=1.4, label="buried conductor")
    ax.plot([], [], "o", mfc="#1f3b73", mec="black", ms=4.5, label="rod")
    if r.case.probes:
        ax.plot([], [], "^", color="#b35806", label="probe")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.11), ncol=2 if r.case.surface_zones else 3, fontsize=7,
              frameon=False)
    ax.set_title("Electrode plan (to scale)", fontsize=10)
    fig.tight_layout()
    return Rendered("plan", "Electrode plan", fig)


def _nice_length(x: float) -> float:
    """A round length (1, 2, 5 × 10^k) not above x, m."""
    k = 10 ** np.floor(np.log10(max(x, 1e-9)))
    for m in (5, 2, 1):
        if m * k <= x:
            return float(m * k)
    return float(k)


def potential_figure(r: StudyResult) -> Rendered:
    """Surface potential contours in volts, with contour labels in % of GPR."""
    s = r.surface
    fig, ax = new_figure(figsize=FIGSIZE, dpi=DPI)
    gpr = r.ground_potential_rise
    im = ax.contourf(s.x, s.y, s.potential, levels=20, cmap="viridis")
    pct = np.arange(10, 100, 10)
    cs = ax.contour(s.x, s.y, s.potential / gpr * 100, levels=pct, colors="black", linewidths=0.5)
    ax.clabel(cs, fmt="%d %%", fontsize=6)
    for k, (level, lines) in enumerate(r.contours):
        color, dash = CONTOUR_STYLES[k % len(CONTOUR_STYLES)]
        for line in lines:
            ax.plot(line[:, 0], line[:, 1], color=color, lw=1.5, ls=dash)
        if lines:
            ax.plot([], [], color=color, lw=1.5, ls=dash, label=f"{level:,.0f} V")
    if r.contours:
        ax.legend(fontsize=7, loc="lower right", title="contours (V)", title_fontsize=7)
    _overlay_electrodes(ax, r)
    _frame(ax, r)
    cb = fig.colorbar(im, ax=ax, shrink=0.85)
    cb.set_label("surface potential (V)")
    ax.set_title(f"Surface potential (lines: % of GPR = {gpr:,.0f} V)", fontsize=10)
    fig.tight_layout()
    return Rendered("potential", "Surface potential", fig, float(np.max(s.potential)))


def _as_written(r: StudyResult) -> str:
    """Title suffix naming the condition a map shows, when the study has scenarios."""
    return f"\ncase as written ('{r.scenario}'); scenarios judged in the tables" if r.scenario else ""


def touch_figure(r: StudyResult) -> Rendered:
    """Touch voltage over the touch area, the tolerable-limit contour and the exceeding areas hatched."""
    s = r.surface
    limit = r.tolerable_touch
    local, _ = r.local_limits()
    fig, ax = new_figure(figsize=FIGSIZE, dpi=DPI)
    im = ax.contourf(s.x, s.y, s.touch, levels=20, cmap="cividis")
    excess = np.where(np.isnan(s.touch), -np.inf, s.touch - local)
    handles = []
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    for poly in getattr(s.touch_area, "geoms", [s.touch_area]):
        if poly.is_empty:
            continue
        for ring in [poly.exterior, *poly.interiors]:
            xs, ys = ring.xy
            ax.plot(xs, ys, color="#f0f0f0", lw=0.9, ls=(0, (2, 2)))
    handles.append(Line2D([], [], color="#7f7f7f", lw=0.9, ls=(0, (2, 2)), label="touch-area edge"))
    if np.nanmax(excess) > 0:
        ax.contourf(s.x, s.y, excess, levels=[0, np.inf], colors="none", hatches=["////"])
        ax.contour(s.x, s.y, np.where(np.isnan(s.touch), -local, s.touch - local), levels=[0], colors="#d7301f",
                   linewidths=1.8)
        handles += [Line2D([], [], color="#d7301f", lw=1.8, label="tolerable-limit contour"),
                    Patch(facecolor="none", hatch="////", edgecolor="black", label="above the limit")]
    ax.legend(handles=handles, fontsize=7, loc="lower right", framealpha=0.9)
    _overlay_electrodes(ax, r)
    _frame(ax, r)
    cb = fig.colorbar(im, ax=ax, shrink=0.85)
    cb.set_label("touch voltage (V)")
    for z in r.zones:
        cb.ax.axhline(z.tolerable_touch, color="#d7301f", lw=2)
    worst = r.touch_check.worst or s.max_touch
    _mark(ax, worst, f"worst {worst.value:,.0f} V")
    verdict = "PASS" if r.touch_ok else "FAIL (hatched: above the limit)"
    where = f"tolerable {limit:,.0f} V" if len(r.zones) == 1 else "tolerable per zone"
    ax.set_title(f"Touch voltage; {where} ({r.body_weights}, red line); {verdict}{_as_written(r)}", fontsize=9)
    fig.tight_layout()
    return Rendered("touch", "Touch voltage", fig, worst.value)


def step_figure(r: StudyResult) -> Rendered:
    """Step-voltage map with its maximum."""
    s = r.surface
    limit = r.tolerable_step
    _, local = r.local_limits()
    fig, ax = new_figure(figsize=FIGSIZE, dpi=DPI)
    im = ax.contourf(s.x, s.y, s.step, levels=20, cmap="cividis")
    if np.isfinite(local).all() and np.max(s.step - local) > 0:
        ax.contour(s.x, s.y, s.step - local, levels=[0], colors="#d7301f", linewidths=1.6)
    _overlay_electrodes(ax, r)
    _frame(ax, r)
    cb = fig.colorbar(im, ax=ax, shrink=0.85)
    cb.set_label(f"step voltage over {r.case.surface.step_distance:g} m (V)")
    worst = r.step_check.worst or s.max_step
    shown = float(np.nanmax(s.step)) if np.isfinite(s.step).any() else 0.0
    # the refined search finds peaks the map's spacing smooths away: say so where the colours fall short
    beyond = (f" (the {r.case.surface.resolution:g} m map shows up to {shown:,.0f} V)"
              if worst.value > 1.05 * shown else "")
    _mark(ax, worst, f"worst {worst.value:,.0f} V{beyond}")
    if limit is None:
        ax.set_title("Step voltage (the standard sets no step limit; reported only)", fontsize=9)
    else:
        where = f"tolerable {limit:,.0f} V" if len(r.zones) == 1 else "tolerable per zone"
        ax.set_title(f"Step voltage; {where} ({r.body_weights}); {'PASS' if r.step_ok else 'FAIL'}{_as_written(r)}",
                     fontsize=9)
    fig.tight_layout()
    return Rendered("step", "Step voltage", fig, worst.value)


def profile_figure(r: StudyResult) -> Rendered:
    """Surface potential and touch voltage along the profile line."""
    p = r.surface.profile
    gpr = r.ground_potential_rise
    fig, ax = new_figure(figsize=(FIGSIZE[0], 3.6), dpi=DPI)
    ax.plot(p.distance, p.potential, color="#1f3b73", lw=1.5, label="surface potential")
    ax.plot(p.distance, gpr - p.potential, color="#b35806", lw=1.2, ls="--",
            label="GPR − potential" if r.solution.metal is None else
            "GPR at injection − |potential| (metal not one equipotential)")
    ax.axhline(gpr, color="gray", lw=0.8, ls=":", label=f"GPR {gpr:,.0f} V")
    ax.axhline(r.tolerable_touch, color="#d7301f", lw=1.0, label=f"tolerable touch {r.tolerable_touch:,.0f} V")
    ax.set_xlabel(f"distance (m) along the line from ({p.x[0]:.1f}, {p.y[0]:.1f}) to ({p.x[-1]:.1f}, {p.y[-1]:.1f})")
    ax.set_ylabel("V")
    ax.set_ylim(0, 1.08 * gpr)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, loc="best")
    ax.set_title(f"Potential profile{_as_written(r)}", fontsize=10)
    fig.tight_layout()
    return Rendered("profile", "Potential profile", fig, float(np.max(p.potential)))


def uncertainty_figure(r: StudyResult) -> Rendered | None:
    """Distribution of the worst touch voltage from the soil uncertainty (log-normal, first order) against
    the tolerable limit; the area beyond the limit shaded with its probability."""
    u = r.uncertainty
    if u is None:
        return None
    q = u.quantities["touch"]
    if q.value is None or not q.sigma_log:
        return None
    from scipy.stats import lognorm

    dist = lognorm(s=q.sigma_log, scale=q.value)
    base = r.scenarios[0] if r.scenarios else r        # the propagation's condition: the case as written
    limit = base.touch_check.limit
    lo, hi = dist.ppf(1e-4), dist.ppf(1 - 1e-4)
    lo, hi = min(lo, 0.9 * limit), max(hi, 1.1 * limit)
    v = np.linspace(lo, hi, 400)
    fig, ax = new_figure(figsize=(FIGSIZE[0], 3.4), dpi=DPI)
    ax.plot(v, dist.pdf(v), color="#1f3b73", lw=1.5, label="worst touch voltage (soil uncertainty)")
    above = v >= limit
    ax.fill_between(v[above], dist.pdf(v[above]), color="#d7301f", alpha=0.35, hatch="////", lw=0,
                    label=f"beyond the limit: P {_p_label(q.probability_exceeds_limit)}")
    ax.axvline(limit, color="#d7301f", lw=1.6, ls=(0, (5, 1.5)), label=f"tolerable {limit:,.0f} V")
    ax.axvline(q.value, color="black", lw=0.8, ls=":", label=f"computed {q.value:,.0f} V")
    ax.set_xlabel("worst touch voltage (V)")
    ax.set_ylabel("probability density (1/V)")
    ax.set_yticks([])
    ax.legend(fontsize=7, loc="upper right")
    where = f", '{base.scenario}'" if base.scenario else ""
    ax.set_title(f"Worst touch voltage{where} under the soil uncertainty (σ(log) = {q.sigma_log:.3f})", fontsize=10)
    fig.tight_layout()
    return Rendered("uncertainty", "Soil uncertainty", fig, q.value)


def _fit_to_metal(ax, seg) -> None:
    """Axes limits around the segments (5 % margin), equal aspect, labels in m."""
    pts = np.vstack([seg.start[:, :2], seg.end[:, :2]])
    lo, hi = pts.min(axis=0), pts.max(axis=0)
    pad = 0.05 * max(hi - lo) + 0.5
    ax.set_xlim(lo[0] - pad, hi[0] + pad)
    ax.set_ylim(lo[1] - pad, hi[1] + pad)
    ax.set_aspect("equal")
    ax.set_xlabel("x (m)")
    ax.set_ylabel("y (m)")


def leakage_figure(r: StudyResult) -> Rendered:
    """Leakage current per unit length along every conductor (A/m), on the plan: the end and corner effect."""
    from matplotlib.collections import LineCollection

    seg = r.segments
    density = r.segment_currents / seg.length
    fig, ax = new_figure(figsize=(FIGSIZE[0], 4.6), dpi=DPI)
    # the energised system in colour; separate (floating or remote) metal thin and grey underneath, so that it
    # does not hide the grid's edge conductors (its currents are reported in the separate-electrode table)
    main = seg.conductors.group[seg.conductor] == 0
    other = ~seg.is_rod & ~main
    if other.any():
        ax.add_collection(LineCollection(np.stack([seg.start[other, :2], seg.end[other, :2]], axis=1),
                                         colors="#9a9a9a", linewidths=0.8, linestyles="--", zorder=1))
    horizontal = ~seg.is_rod & main
    lines = np.stack([seg.start[horizontal, :2], seg.end[horizontal, :2]], axis=1)
    lc = LineCollection(lines, array=density[horizontal], cmap="viridis", linewidths=3.0, zorder=2)
    ax.add_collection(lc)
    rods = seg.is_rod & main
    if rods.any():
        # a rod's leakage per metre, shown at its top as the mean over its segments
        top = {}
        for k in np.flatnonzero(rods):
            top.setdefault(int(seg.conductor[k]), []).append(density[k])
        xy = np.array([seg.conductors.start[k, :2] for k in top])
        ax.scatter(xy[:, 0], xy[:, 1], c=[np.mean(v) for v in top.values()], cmap="viridis", s=40, marker="s",
                   edgecolors="black", linewidths=0.6, norm=lc.norm, zorder=3)
    _fit_to_metal(ax, seg)
    cb = fig.colorbar(lc, ax=ax, shrink=0.85)
    cb.set_label("leakage current per metre (A/m)")
    ax.set_title(f"Leakage current along the energised conductors (IG = {r.grid_current / 1000:,.2f} kA)\n"
                 "squares: rods, mean per metre" + ("; grey dashed: separate metal (not coloured)" if other.any() else ""),
                 fontsize=9)
    fig.tight_layout()
    return Rendered("leakage", "Leakage current", fig, float(density[main].max()))


def metal_potential_figure(r: StudyResult) -> Rendered | None:
    """|Potential of the metal| as % of the injection point's, on the plan (conductors with impedance only)."""
    metal = r.solution.metal
    if metal is None:
        return None
    from matplotlib.collections import LineCollection

    seg = r.segments
    node = np.abs(metal.node_potential)
    percent = 50.0 * (node[metal.network.ends[:, 0]] + node[metal.network.ends[:, 1]])
    fig, ax = new_figure(figsize=(FIGSIZE[0], 4.6), dpi=DPI)
    horizontal = ~seg.is_rod
    lc = LineCollection(np.stack([seg.start[horizontal, :2], seg.end[horizontal, :2]], axis=1),
                        array=percent[horizontal], cmap="viridis", linewidths=3.0)
    ax.add_collection(lc)
    if seg.is_rod.any():
        tops = np.flatnonzero(seg.is_rod & (np.abs(seg.start[:, 2] - seg.conductors.start[seg.conductor, 2]) < 1e-9))
        ax.scatter(seg.start[tops, 0], seg.start[tops, 1], c=percent[tops], cmap="viridis", norm=lc.norm, s=40,
                   marker="s", edgecolors="black", linewidths=0.6, zorder=3)
    for k in metal.solution.injection_nodes:
        x, y, _ = metal.network.nodes[k]
        ax.plot(x, y, marker="*", ms=14, color="#d62728", mec="black", zorder=4)
    _fit_to_metal(ax, seg)
    cb = fig.colorbar(lc, ax=ax, shrink=0.85)
    cb.set_label("|metal potential| (% of the injection point's)")
    ax.set_title(f"Potential of the metal (star: injection, GPR {r.ground_potential_rise:,.0f} V; squares: rod tops)",
                 fontsize=9)
    fig.tight_layout()
    return Rendered("metal_potential", "Metal potential", fig, float(percent.min()))


def all_figures(r: StudyResult) -> list[Rendered]:
    """Every figure of a study, in report order."""
    # the maps are those of the case as written: drawn with its own limits, worst points and verdicts (a
    # scenario's limit or worst point does not belong on them); the titles say so when there are scenarios
    own = r.scenarios[0] if r.scenarios else r
    figs = [plan_figure(r), potential_figure(own), touch_figure(own), step_figure(own), profile_figure(own),
            leakage_figure(own)]
    m = metal_potential_figure(r)
    figs += [m] if m is not None else []
    u = uncertainty_figure(r)
    return figs + ([u] if u is not None else [])


def svg_bytes(fig: Figure) -> bytes:
    """The figure as SVG bytes (vector; deterministic: no date, fixed ids)."""
    import matplotlib as mpl

    buf = io.BytesIO()
    with mpl.rc_context({"svg.hashsalt": "grounding", "svg.fonttype": "path"}):
        fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
    return buf.getvalue()


def png_bytes(fig: Figure) -> bytes:
    """The figure as PNG bytes (deterministic for the same figure)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, metadata={"Software": None})
    return buf.getvalue()


def _p_label(p: float) -> str:
    """'= 12.3 %' or '> 99.99 %' (a bound is not written as an equality)."""
    text = probability_text(p)
    return text if text[0] in "<>" else "= " + text
