"""An interactive study view: one self-contained HTML file (plotly, all script inlined) with the plan, the
map layers (surface potential, touch, step, margin to the local limit) per scenario, hover values with the
local limit and zone, and the summary and verdicts beside it.

Plotly was chosen over bokeh because its heatmaps carry per-point hover data (the local limit and zone of
every map point) as compact typed arrays; the inlined library is about 4.8 MB (bokeh's inline resources
3.9 MB, measured with bokeh 3.9.2 and plotly 7.1.0).
"""

from __future__ import annotations

import html
import json

import numpy as np
import shapely

from ..cautions import CAUTIONS
from ..study.result import StudyResult
from ..version import __version__
from .figures import SEPARATE_STYLE

#: Colours as in the PDF figures: conductors, probes, the tolerable-limit contour, worst points.
CONDUCTOR = "#1f3b73"
PROBE = "#b35806"
LIMIT = "#d7301f"
#: Plotly dash patterns for the separate electrodes' line styles of the PDF.
DASH = {"floating": "dash", "remote": "dashdot", "bonded": "dot"}
#: Map layers: key, menu label, colour scale (the PDF's: viridis for potential, cividis for voltages).
LAYERS = (("potential", "Surface potential", "Viridis"), ("touch", "Touch voltage", "Cividis"),
          ("step", "Step voltage", "Cividis"), ("margin", "Touch margin to the local limit", "RdBu"))


def _float32(a: np.ndarray) -> np.ndarray:
    """float32 copy for compact embedding (NaN stays NaN: a gap in the heatmap)."""
    return np.asarray(a, dtype=np.float32)


#: Bytes of map data a view may embed (the inlined plotly library adds about 4.8 MB); larger maps are
#: shown at every k-th point. Per map point and scenario: ten float32 arrays in base64 (about 5.4 bytes
#: each) and, with several zones, the zone name on three layers (about 12 bytes each).
MAX_VIEW_BYTES = 4_500_000


def view_stride(r: StudyResult) -> int:
    """Every how many map points the view shows (1: all), to stay under MAX_VIEW_BYTES."""
    n = len(r.surface.x) * len(r.surface.y)
    per_point = 10 * 5.4 + (36 if len(r.zones) > 1 else 0)
    runs = max(1, len(r.scenarios))
    return max(1, int(np.ceil(np.sqrt(n * runs * per_point / MAX_VIEW_BYTES))))


class _Thinned:
    """The map of a result at every k-th point (the attributes the view reads)."""

    def __init__(self, r: StudyResult, k: int):
        s = r.surface
        touch_lim, step_lim = r.local_limits()
        self.x, self.y = s.x[::k], s.y[::k]
        self.potential, self.touch, self.step = (a[::k, ::k] for a in (s.potential, s.touch, s.step))
        self.zone_labels = np.asarray(s.zone_labels)[::k, ::k]
        self.limits = touch_lim[::k, ::k], step_lim[::k, ::k]


def _layer_traces(r: StudyResult, prefix: str, k: int = 1) -> tuple[list[dict], list[str]]:
    """Heatmaps (and the limit contour) of one result, with names of the layers they belong to."""
    import plotly.graph_objects as go

    s = _Thinned(r, k)
    touch_lim, step_lim = s.limits
    gpr = r.ground_potential_rise
    zone_names = [z.name for z in r.zones]
    labels = np.asarray(s.zone_labels)
    zone_text = np.array(zone_names, dtype=object)[labels] if len(zone_names) > 1 else None
    one_zone = "" if zone_text is not None else f" ({zone_names[0]})"
    zone_part = "<br>zone %{text}" if zone_text is not None else one_zone
    step_lim_shown = np.where(np.isnan(step_lim), -1.0, step_lim)          # −1: the standard sets none
    margin = touch_lim - s.touch
    traces, owner = [], []

    def heat(key, z, colorscale, title, hover, custom, zoned=True, **extra):
        if not zoned and zone_text is not None:
            hover = hover.replace(zone_part, "")
        traces.append(go.Heatmap(x=s.x, y=s.y, z=_float32(z), colorscale=colorscale, customdata=custom,
                                 text=zone_text if zoned else None, hovertemplate=hover + "<extra></extra>",
                                 name=f"{prefix}{title}",
                                 colorbar=dict(title=dict(text=title, side="right"), len=0.9), visible=False,
                                 hoverongaps=False, **extra))
        owner.append(key)

    xy = "x %{x:.2f} m, y %{y:.2f} m<br>"
    heat("potential", s.potential, "Viridis", "V",
         xy + "surface potential %{z:,.0f} V (%{customdata:.1f} % of GPR)" + zone_part,
         _float32(100.0 * s.potential / gpr), zoned=False)
    heat("touch", s.touch, "Cividis", "V",
         xy + "touch voltage %{z:,.0f} V<br>local limit %{customdata:,.0f} V" + zone_part, _float32(touch_lim))
    heat("step", s.step, "Cividis", "V",
         xy + "step voltage %{z:,.0f} V<br>local limit %{customdata:,.0f} V (−1: none set)" + zone_part,
         _float32(step_lim_shown))
    finite = margin[np.isfinite(margin)]
    span = float(np.max(np.abs(finite))) if finite.size else 1.0
    heat("margin", margin, "RdBu", "V", xy + "margin %{z:,.0f} V (limit − touch)<br>local limit %{customdata:,.0f} V"
         + zone_part, _float32(touch_lim), zmid=0.0, zmin=-span, zmax=span)
    # exceeding areas: a translucent red layer and the limit contour
    exceed = np.where(margin < 0, 1.0, np.nan)
    traces.append(go.Heatmap(x=s.x, y=s.y, z=_float32(exceed), colorscale=[[0, LIMIT], [1, LIMIT]], showscale=False,
                             opacity=0.35, hoverinfo="skip", visible=False, name=f"{prefix}above the limit"))
    owner.append("margin")
    traces.append(go.Contour(x=s.x, y=s.y, z=_float32(np.where(np.isnan(margin), 1.0, margin)),
                             contours=dict(start=0, end=0, size=1, coloring="none"), line=dict(color=LIMIT, width=2),
                             showscale=False, hoverinfo="skip", visible=False, name=f"{prefix}tolerable-limit contour",
                             showlegend=True))
    owner.append("margin")
    return traces, owner


def _plan_traces(r: StudyResult) -> list:
    """Conductors, rods, separate electrodes, zones, touch area, probes and worst points (always shown)."""
    import plotly.graph_objects as go

    c = r.segments.conductors
    own = np.zeros(len(c.keys), bool)
    separate = [(e, c.matching((e.key,))) for e in r.case.separate_electrodes]
    for _, mask in separate:
        own |= mask
    out = []

    def lines(mask):
        xs, ys = [], []
        for k in np.flatnonzero(mask):
            xs += [c.start[k, 0], c.end[k, 0], None]
            ys += [c.start[k, 1], c.end[k, 1], None]
        return xs, ys

    xs, ys = lines(~c.is_rod & ~own)
    out.append(go.Scatter(x=xs, y=ys, mode="lines", line=dict(color=CONDUCTOR, width=2), name="buried conductor",
                          hoverinfo="skip"))
    rods = c.start[c.is_rod & ~own]
    if len(rods):
        out.append(go.Scatter(x=rods[:, 0], y=rods[:, 1], mode="markers", name="rod",
                              marker=dict(color=CONDUCTOR, size=7, line=dict(color="black", width=1)),
                              hovertemplate="rod at (%{x:.2f}, %{y:.2f}) m<extra></extra>"))
    for e, mask in separate:
        style = SEPARATE_STYLE[e.connection]
        xs, ys = lines(~c.is_rod & mask)
        out.append(go.Scatter(x=xs, y=ys, mode="lines", name=f"{e.name}: {style['label']}", hoverinfo="name",
                              line=dict(color=style["color"], width=2.5, dash=DASH[e.connection])))
    for z in r.case.surface_zones:
        for ring in [z.area.shell] + list(z.area.holes):
            pts = list(ring) + [ring[0]]
            out.append(go.Scatter(x=[p[0] for p in pts], y=[p[1] for p in pts], mode="lines", name=f"zone {z.name}",
                                  line=dict(color="#7f7f7f", width=1, dash="longdash"), hoverinfo="name"))
    area = r.surface.touch_area
    for poly in getattr(area, "geoms", [area]):
        if poly.is_empty or poly.geom_type != "Polygon":
            continue
        for ring in [poly.exterior] + list(poly.interiors):
            xy = shapely.get_coordinates(ring)
            out.append(go.Scatter(x=xy[:, 0], y=xy[:, 1], mode="lines", name="touch-area edge", showlegend=False,
                                  line=dict(color="#7f7f7f", width=1, dash="dot"), hoverinfo="skip"))
    if r.case.probes:
        p = np.array(r.case.probes, float)
        out.append(go.Scatter(x=p[:, 0], y=p[:, 1], mode="markers+text", name="probe",
                              text=[f"P{k}" for k in range(1, len(p) + 1)], textposition="bottom right",
                              marker=dict(symbol="triangle-up", color=PROBE, size=10),
                              hovertemplate="%{text} (%{x:.2f}, %{y:.2f}) m<extra></extra>"))
    for label, check in (("touch", r.touch_check), ("step", r.step_check), ("mesh", r.mesh_check)):
        w = check.worst if check is not None else None
        if w is None:
            continue
        limit = "no limit" if check.limit is None else f"limit {check.limit:,.0f} V"
        out.append(go.Scatter(x=[w.x], y=[w.y], mode="markers", name=f"worst {label}",
                              marker=dict(symbol="x", size=13, color="white", line=dict(color="black", width=2)),
                              hovertemplate=f"worst {label} voltage {w.value:,.0f} V ({limit}, zone {check.zone})"
                                            "<br>at (%{x:.2f}, %{y:.2f}) m<extra></extra>"))
    return out


def _figure(r: StudyResult):
    """The plotly figure of a study (a layer set per scenario) and the labels of its map menu."""
    import plotly.graph_objects as go

    runs = list(r.scenarios) if r.scenarios else [r]
    stride = view_stride(r)
    traces, keys = [], []
    for k, run in enumerate(runs):
        prefix = f"{run.scenario}: " if r.scenarios else ""
        t, owner = _layer_traces(run, prefix, stride)
        traces += t
        keys += [(k, o) for o in owner]
    plan = _plan_traces(r)
    n_layers = len(traces)
    buttons = []
    for k, run in enumerate(runs):
        for key, label, _ in LAYERS:
            visible = [kk == (k, key) for kk in keys] + [True] * len(plan)
            name = f"{run.scenario}: {label}" if r.scenarios else label
            buttons.append(dict(label=name, method="restyle", args=[{"visible": visible}]))
    first = [kk == (0, "touch") for kk in keys]
    for t, v in zip(traces, first):
        t.visible = v
    fig = go.Figure(traces + plan)
    s = r.surface
    fig.update_layout(
        template="plotly_white", height=720, margin=dict(l=60, r=20, t=60, b=50),
        legend=dict(orientation="h", y=-0.12), dragmode="zoom",
        updatemenus=[dict(buttons=buttons, direction="down", x=0.0, xanchor="left", y=1.09, yanchor="top",
                          active=1, showactive=True)],
        xaxis=dict(title="x (m)", range=[float(s.x[0]), float(s.x[-1])], constrain="domain"),
        yaxis=dict(title="y (m)", range=[float(s.y[0]), float(s.y[-1])], scaleanchor="x", scaleratio=1,
                   constrain="domain"))
    return fig, n_layers, [b["label"] for b in buttons], stride


def _summary_rows(r: StudyResult) -> str:
    def row(name, value, note=""):
        return f"<tr><th>{html.escape(name)}</th><td>{html.escape(value)}</td><td>{html.escape(note)}</td></tr>"

    metal = r.solution.metal
    rows = [row("Grid impedance |Zg|" if metal is not None else "Grid resistance Rg", f"{r.grid_resistance:.4f} Ω"),
            row("Split factor Sf", f"{r.case.fault.split_factor:.3g}",
                "from the lines and cables" if r.current_division is not None else "as given"),
            row("Grid current IG", f"{r.grid_current / 1000:.3f} kA", "Df · Sf · 3I0"),
            row("Ground potential rise", f"{r.ground_potential_rise:,.0f} V",
                "at the injection point" if metal is not None else "GPR = IG · Rg")]
    return "\n".join(rows)


def _verdict_rows(r: StudyResult) -> str:
    out = []
    for name, check in (("Touch voltage", r.touch_check), ("Step voltage", r.step_check),
                        ("Mesh voltage", r.mesh_check)):
        w = check.worst if check is not None else None
        if w is None:
            out.append(f"<tr><th>{name}</th><td colspan=4>not evaluated (no such area)</td></tr>")
            continue
        limit = "—" if check.limit is None else f"{check.limit:,.0f} V"
        verdict = "n/a" if check.ok is None else ("PASS" if check.ok else "FAIL")
        scen = f" [{check.scenario}]" if getattr(check, "scenario", "") else ""
        out.append(f"<tr class='{verdict.lower().replace('/', '')}'><th>{name}</th><td>{w.value:,.0f} V</td>"
                   f"<td>{limit}</td><td>{verdict}</td><td>({w.x:.1f}, {w.y:.1f}) m, {html.escape(check.zone)}"
                   f"{html.escape(scen)}</td></tr>")
    for e in r.separate:                         # touch near each separate electrode (the case as written)
        t = e.touch
        if t.worst is None:
            out.append(f"<tr><th>Touch near {html.escape(e.name)}</th><td colspan=4>nowhere within reach on the map"
                       "</td></tr>")
            continue
        verdict = "PASS" if t.ok else "FAIL"
        out.append(f"<tr class='{verdict.lower()}'><th>Touch near {html.escape(e.name)}</th>"
                   f"<td>{t.worst.value:,.0f} V</td><td>{t.limit:,.0f} V</td><td>{verdict}</td>"
                   f"<td>({t.worst.x:.1f}, {t.worst.y:.1f}) m, {html.escape(t.zone)}</td></tr>")
    c = r.conductor
    verdict = "PASS" if c.ok else "FAIL"
    scen = f" [{c.scenario}]" if c.scenario else ""
    out.append(f"<tr class='{verdict.lower()}'><th>Conductor size</th><td>{c.actual_area_mm2:.1f} mm² fitted</td>"
               f"<td>{c.required_area_mm2:.1f} mm² needed</td><td>{verdict}</td>"
               f"<td>{html.escape((c.element or '') + scen)}</td></tr>")
    return "\n".join(out)


def _scenario_rows(r: StudyResult) -> str:
    """One row per scenario: Rg, GPR, worst touch and step and whether all passes."""
    if not r.scenarios:
        return ""
    rows = "".join(
        f"<tr class='{'pass' if x.passes else 'fail'}'><th>{html.escape(x.scenario)}</th>"
        f"<td>{x.grid_resistance:.3f} Ω</td><td>{x.ground_potential_rise:,.0f} V</td>"
        f"<td>{x.worst_touch:,.0f} / {x.tolerable_touch:,.0f} V</td><td>{'PASS' if x.passes else 'FAIL'}</td></tr>"
        for x in r.scenarios)
    return ("<table><tr><th>scenario</th><th>Rg</th><th>GPR</th><th>touch / limit</th><th>all</th></tr>"
            f"{rows}</table>")


def _data_block(r: StudyResult, labels: list[str]) -> dict:
    """The values the view shows, for machines (tests compare them with the JSON results)."""
    def ext(check):
        w = check.worst if check is not None else None
        return None if w is None else {"value_v": w.value, "x": w.x, "y": w.y, "zone": check.zone}

    return {"tool": {"name": "grounding", "version": __version__}, "case_sha256": r.case.sha256,
            "grid_resistance_ohm": r.grid_resistance, "ground_potential_rise_v": r.ground_potential_rise,
            "worst": {"touch": ext(r.touch_check), "step": ext(r.step_check), "mesh": ext(r.mesh_check)},
            "layers": labels, "scenarios": [x.scenario for x in r.scenarios], "map_stride": view_stride(r)}


STYLE = """
body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;margin:0;color:#1b1b1b}
header{padding:10px 18px;background:#1f3b73;color:white}
header h1{font-size:19px;margin:0}
.caution{margin:12px 18px;padding:10px 14px;border:3px solid #d7301f;background:#fff4f0;font-size:14px}
.caution b{color:#b00000}
main{display:grid;grid-template-columns:minmax(0,1fr) 420px;gap:12px;padding:0 18px 18px;align-items:start}
@media (max-width:1000px){main{grid-template-columns:minmax(0,1fr)}}
main>.view{min-width:0}
aside{font-size:13px}
.sha{overflow-wrap:anywhere}
table{border-collapse:collapse;width:100%;margin-bottom:12px}
th,td{border-bottom:1px solid #ddd;padding:4px 6px;text-align:left;vertical-align:top}
td:nth-child(2),td:nth-child(3),td:nth-child(4),tr:first-child th{white-space:nowrap}
tr.fail td,tr.fail th{background:#fde0dc}
tr.pass td:nth-child(4){color:#1b7837;font-weight:bold}
tr.fail td:nth-child(4){color:#b00000;font-weight:bold}
.verdict{font-size:15px;font-weight:bold;padding:6px 8px;margin:6px 0}
.verdict.fail{background:#fde0dc;color:#b00000}.verdict.pass{background:#e5f5e0;color:#1b7837}
"""


def _page(title: str, body: str) -> bytes:
    cautions = "".join(f"<li>{html.escape(c)}</li>" for c in CAUTIONS)
    return (f"<!DOCTYPE html>\n<html lang='en'><head><meta charset='utf-8'>"
            f"<meta name='viewport' content='width=device-width, initial-scale=1'>"
            f"<meta name='generator' content='grounding {__version__}'><title>{html.escape(title)}</title>"
            f"<style>{STYLE}</style></head><body>"
            f"<header><h1>{html.escape(title)}</h1></header>"
            f"<div class='caution' role='alert'><b>CAUTION — preliminary study aid only.</b><ul>{cautions}</ul></div>"
            f"{body}</body></html>").encode("utf-8")


def _section(r: StudyResult, div_id: str, include_js: bool) -> str:
    fig, _, labels, stride = _figure(r)
    note = "" if stride == 1 else (f"<p style='font-size:12px'>Maps shown at one point in {stride} along each axis of "
                                   f"the study's map (to keep this file small); the worst points and verdicts are the study's "
                                   "own.</p>")
    plot = fig.to_html(full_html=False, include_plotlyjs=include_js, div_id=div_id,
                       config={"displaylogo": False, "responsive": True, "scrollZoom": True})
    verdict = "pass" if r.passes else "fail"
    text = "All criteria pass as modelled" if r.passes else (
        "At least one criterion FAILS: not safe as modelled. Failing: " + html.escape("; ".join(r.failures())))
    data = json.dumps(_data_block(r, labels)).replace("</", "<\\/")
    warnings = "".join(f"<li>{html.escape(w)}</li>" for w in r.warnings)
    return (f"<main><div class='view'>{plot}{note}</div><aside>"
            f"<div class='verdict {verdict}'>{text}</div>"
            f"<table>{_summary_rows(r)}</table>"
            f"<table><tr><th></th><th>worst</th><th>tolerable</th><th>verdict</th><th>where</th></tr>"
            f"{_verdict_rows(r)}</table>"
            + _scenario_rows(r) +
            f"<p class='sha'>Case {html.escape(r.case.source)}<br>SHA-256 {r.case.sha256}</p>"
            + (f"<details><summary>Notes on the model ({len(r.warnings)})</summary><ul>{warnings}</ul></details>"
               if warnings else "")
            + f"<script type='application/json' class='study-data' data-for='{div_id}'>{data}</script>"
            "</aside></main>")


def study_html(r: StudyResult) -> bytes:
    """The interactive view of one study as a self-contained HTML document (UTF-8 bytes)."""
    return _page(f"Earthing study view — {r.case.title or r.case.source}", _section(r, "study-view", True))


def compare_html(results: list[StudyResult], labels: list[str]) -> bytes:
    """The options of a comparison side by side (one view each), in one self-contained HTML document."""
    parts = []
    for k, (r, label) in enumerate(zip(results, labels)):
        parts.append(f"<h2 style='margin:12px 18px 0'>Option {k + 1}: {html.escape(label)}</h2>")
        parts.append(_section(r, f"option-{k + 1}", include_js=(k == 0)))
    return _page("Earthing layout options — comparison view", "".join(parts))
