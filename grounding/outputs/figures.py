"""Figures of a study, drawn from the real solution: plan, potential, touch, step and profile.

Colour maps are perceptually uniform and colour-blind-safe (viridis, cividis); every colour bar is
labelled with its unit; electrodes are overlaid on every map. +y is drawn as north.
"""

from __future__ import annotations

import io
from dataclasses import dataclass

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402

from ..study import StudyResult  # noqa: E402

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


def _overlay_electrodes(ax, r: StudyResult, color="white", lw=1.1):
    c = r.segments.conductors
    for k in np.flatnonzero(~c.is_rod):
        ax.plot([c.start[k, 0], c.end[k, 0]], [c.start[k, 1], c.end[k, 1]], color=color, lw=lw, solid_capstyle="butt")
    rods = c.start[c.is_rod]
    if len(rods):
        ax.plot(rods[:, 0], rods[:, 1], "o", ms=4.5, mfc=color, mec="black", mew=0.6, ls="none")


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
    fig, ax = plt.subplots(figsize=FIGSIZE, dpi=DPI)
    _overlay_electrodes(ax, r, color="#1f3b73", lw=1.4)
    c = r.segments.conductors
    pts = np.vstack([c.start[:, :2], c.end[:, :2]])
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
        dx, dy = g.size[0] / g.meshes[0], g.size[1] / g.meshes[1]
        ax.text(g.origin[0] + dx / 2, g.origin[1] + g.size[1] - dy / 2, f"mesh\n{dx:.1f} × {dy:.1f} m",
                ha="center", va="center", fontsize=6.5, color="#444444")
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
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.11), ncol=3, fontsize=7, frameon=False)
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
    fig, ax = plt.subplots(figsize=FIGSIZE, dpi=DPI)
    gpr = r.ground_potential_rise
    im = ax.contourf(s.x, s.y, s.potential, levels=20, cmap="viridis")
    pct = np.arange(10, 100, 10)
    cs = ax.contour(s.x, s.y, s.potential / gpr * 100, levels=pct, colors="black", linewidths=0.5)
    ax.clabel(cs, fmt="%d %%", fontsize=6)
    _overlay_electrodes(ax, r)
    _frame(ax, r)
    cb = fig.colorbar(im, ax=ax, shrink=0.85)
    cb.set_label("surface potential (V)")
    ax.set_title(f"Surface potential (lines: % of GPR = {gpr:,.0f} V)", fontsize=10)
    fig.tight_layout()
    return Rendered("potential", "Surface potential", fig, float(np.max(s.potential)))


def touch_figure(r: StudyResult) -> Rendered:
    """Touch voltage over the touch area, the tolerable-limit contour and the exceeding areas hatched."""
    s = r.surface
    limit = r.tolerable_touch
    fig, ax = plt.subplots(figsize=FIGSIZE, dpi=DPI)
    im = ax.contourf(s.x, s.y, s.touch, levels=20, cmap="cividis")
    if np.nanmax(s.touch) > limit:
        ax.contourf(s.x, s.y, np.where(np.isnan(s.touch), -np.inf, s.touch), levels=[limit, np.inf],
                    colors="none", hatches=["////"])
        ax.contour(s.x, s.y, np.nan_to_num(s.touch, nan=-1.0), levels=[limit], colors="#d7301f", linewidths=1.6)
    _overlay_electrodes(ax, r)
    _frame(ax, r)
    cb = fig.colorbar(im, ax=ax, shrink=0.85)
    cb.set_label("touch voltage (V)")
    cb.ax.axhline(limit, color="#d7301f", lw=2)
    _mark(ax, s.max_touch, f"max {s.max_touch.value:,.0f} V")
    verdict = "PASS" if r.touch_ok else "FAIL: hatched areas exceed"
    ax.set_title(f"Touch voltage; tolerable {limit:,.0f} V ({r.body_weight} kg, red line); {verdict}",
                 fontsize=9)
    fig.tight_layout()
    return Rendered("touch", "Touch voltage", fig, s.max_touch.value)


def step_figure(r: StudyResult) -> Rendered:
    """Step-voltage map with its maximum."""
    s = r.surface
    limit = r.tolerable_step
    fig, ax = plt.subplots(figsize=FIGSIZE, dpi=DPI)
    im = ax.contourf(s.x, s.y, s.step, levels=20, cmap="cividis")
    if s.max_step.value > limit:
        ax.contour(s.x, s.y, s.step, levels=[limit], colors="#d7301f", linewidths=1.6)
    _overlay_electrodes(ax, r)
    _frame(ax, r)
    cb = fig.colorbar(im, ax=ax, shrink=0.85)
    cb.set_label(f"step voltage over {r.case.surface.step_distance:g} m (V)")
    _mark(ax, s.max_step, f"max {s.max_step.value:,.0f} V")
    ax.set_title(f"Step voltage; tolerable {limit:,.0f} V ({r.body_weight} kg); "
                 f"{'PASS' if r.step_ok else 'FAIL'}", fontsize=9)
    fig.tight_layout()
    return Rendered("step", "Step voltage", fig, s.max_step.value)


def profile_figure(r: StudyResult) -> Rendered:
    """Surface potential and touch voltage along the profile line."""
    p = r.surface.profile
    gpr = r.ground_potential_rise
    fig, ax = plt.subplots(figsize=(FIGSIZE[0], 3.6), dpi=DPI)
    ax.plot(p.distance, p.potential, color="#1f3b73", lw=1.5, label="surface potential")
    ax.plot(p.distance, gpr - p.potential, color="#b35806", lw=1.2, ls="--", label="GPR − potential")
    ax.axhline(gpr, color="gray", lw=0.8, ls=":", label=f"GPR {gpr:,.0f} V")
    ax.axhline(r.tolerable_touch, color="#d7301f", lw=1.0, label=f"tolerable touch {r.tolerable_touch:,.0f} V")
    ax.set_xlabel(f"distance along the line from ({p.x[0]:.1f}, {p.y[0]:.1f}) m to ({p.x[-1]:.1f}, {p.y[-1]:.1f}) m (m)")
    ax.set_ylabel("V")
    ax.set_ylim(0, 1.08 * gpr)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, loc="best")
    ax.set_title("Potential profile", fontsize=10)
    fig.tight_layout()
    return Rendered("profile", "Potential profile", fig, float(np.max(p.potential)))


def all_figures(r: StudyResult) -> list[Rendered]:
    """Every figure of a study, in report order."""
    return [plan_figure(r), potential_figure(r), touch_figure(r), step_figure(r), profile_figure(r)]


def png_bytes(fig: Figure) -> bytes:
    """The figure as PNG bytes (deterministic for the same figure)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, metadata={"Software": None})
    plt.close(fig)
    return buf.getvalue()
