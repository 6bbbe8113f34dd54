"""The sections of the review report, one function each: cover, inputs, plan, results, figures, method, review.

Each takes the report's :class:`Context` and returns its flowables.
"""

from __future__ import annotations

import io
import math
from dataclasses import dataclass
from typing import Callable

import numpy as np
from reportlab.lib.units import mm
from reportlab.platypus import Image, KeepTogether, PageBreak, Paragraph, Spacer

from ...study.result import StudyResult
from ...study.uncertainty import uncertain_passes
from ...study.validation import validation_checks
from ...version import __version__
from ..figures import png_bytes
from ..plan_vector import plan_drawing
from ..summary_text import (
    UNCERTAINTY_LABELS,
    covering_text,
    probability_text,
    shared_probability_lines,
    soil_text,
    solver_text,
    uncertain_pass_text,
)
from .common import caution_box, plus_minus, table, verdict_word, volts
from .method import method_paragraphs
from .tables import (
    criteria_story,
    electrode_rows,
    grid_rows,
    scenario_rows,
    separate_rows,
    touch_area_text,
    verdict_rows,
    zone_rows,
)


@dataclass(frozen=True)
class Context:
    """What every section needs: the study, the styles, a paragraph maker, the figures by name and the date."""

    r: StudyResult
    st: dict
    P: Callable
    image: Callable
    has_figure: Callable
    date: str


def _sizing_time(r) -> float:
    """The clearing time (s) of the condition that governs conductor sizing."""
    name = r.conductor.scenario
    return next((x.case.fault.clearing_time for x in r.scenarios if x.scenario == name), r.case.fault.clearing_time)


def cover(ctx: Context) -> list:
    """Identity of the study, the overall verdict, the verdict table, Rg, IG, GPR and the cautions."""
    r, st, P = ctx.r, ctx.st, ctx.P
    c, f = r.case, r.case.fault
    story = []
    story += [Spacer(1, 8 * mm), P("Earthing grid study", "subtitle"), P(c.title, "title")]
    ident = [["Site", c.site or "—"], ["Date", ctx.date], ["Tool", f"grounding {__version__}"],
             ["Case file", c.source], ["Case SHA-256", c.sha256]]
    if c.electrodes.drawing is not None:
        ident.append(["Drawing file", c.electrodes.drawing[0]])
        ident.append(["Drawing SHA-256", c.electrodes.drawing[1]])
    if c.soil_fit is not None:
        ident.append(["Readings file", c.soil_fit.readings.source])
        ident.append(["Readings SHA-256", c.soil_fit.readings.sha256])
    story += [Spacer(1, 4 * mm), table(ident, [35 * mm, 135 * mm], st, header=False), Spacer(1, 6 * mm)]
    overall = r.passes
    story.append(P(f"<b>Overall: {'all criteria PASS' if overall else 'at least one criterion FAILS'}</b> "
                   + (f"(IEEE Std 80, {r.body_weights} body, ts = {f.shock_duration:g} s)"
                      if c.criteria.standards[0] == "ieee80" else
                      f"(EN 50522, tf = {f.shock_duration:g} s, footwear {c.criteria.footwear_resistance:g} Ω)")
                   + (" — further standards in section 3.2" if len(c.criteria.standards) > 1 else ""), "h2"))
    if not overall:
        from xml.sax.saxutils import escape
        story.append(P("Failing: " + escape("; ".join(r.failures()) or "see the table") + ".", "body"))
    story += [table(verdict_rows(r, st), [30 * mm, 32 * mm, 32 * mm, 18 * mm, 17 * mm, 41 * mm], st, verdict_col=4),
              Spacer(1, 4 * mm)]
    story.append(P(f"Grid resistance Rg = <b>{r.grid_resistance:.4f} Ω</b>; grid current IG = "
                   f"<b>{r.grid_current / 1000:.3f} kA</b>; ground potential rise GPR = <b>{volts(r.ground_potential_rise)}</b>."))
    story += [Spacer(1, 6 * mm), caution_box(st), PageBreak()]
    return story


def inputs(ctx: Context) -> list:
    """1 Inputs: soil (and its fit), surface coverings, fault and grid current, criteria and discretisation."""
    r, st, P = ctx.r, ctx.st, ctx.P
    c, f, s = r.case, r.case.fault, r.surface
    story = []
    story.append(P("1  Inputs", "h1"))
    story.append(P("1.1  Soil and surface layer", "h2"))
    soil_rows = [["Layer", "Resistivity", "Thickness"]]
    for i, layer in enumerate(c.soil.layers, start=1):
        soil_rows.append([str(i), f"{layer.resistivity:.4g} Ω·m",
                          f"{layer.thickness:.3g} m" if layer.thickness else "to infinite depth"])
    story.append(table(soil_rows, [20 * mm, 40 * mm, 50 * mm], st))
    story.append(P(f"Model: {soil_text(c)}."))
    if c.soil_fit is not None:
        fit = c.soil_fit
        story.append(P(f"Fitted from the {fit.readings.array} sounding <b>{fit.readings.source}</b> "
                       f"({len(fit.readings)} readings; apparent resistivity: {fit.readings.conversion}). "
                       f"Recommended {fit.recommended}-layer model, RMS misfit {fit.best.rms_misfit_percent:.1f} %: "
                       f"{fit.reason}."))
        rows = [["Model", "Layers (ρ Ω·m / h m, 1-σ)", "RMS misfit", "BIC"]]
        for n, m in sorted(fit.models.items()):
            desc = "; ".join(f"{l.resistivity:.0f} {plus_minus(l.resistivity_uncertainty)}"
                             + (f" / {l.thickness:.2f} {plus_minus(l.thickness_uncertainty)}"
                                if l.thickness is not None else "") for l in m.layers)
            rows.append([f"{n}-layer{' ✓' if n == fit.recommended else ''}", Paragraph(desc, st["small"]),
                         f"{m.rms_misfit_percent:.1f} %", f"{m.bic:.1f}"])
        story.append(table(rows, [22 * mm, 105 * mm, 22 * mm, 20 * mm], st))
        from ..soil_outputs import fit_figure
        fig = fit_figure(fit)
        wi, hi = fig.get_size_inches()
        story.append(Image(io.BytesIO(png_bytes(fig)), width=140 * mm, height=140 * mm * hi / wi))
        rd = fit.readings
        rows = [["Line", "Traverse", "Spacing m", "ρa Ω·m", "Model − reading"]]
        for i in range(len(rd)):
            rows.append([str(rd.rows[i]), rd.traverse[i] or "—", f"{rd.spacing[i]:g}",
                         f"{rd.apparent_resistivity[i]:.4g}",
                         f"{math.expm1(fit.best.residuals[i]) * 100:+.1f} %" + (" (down-weighted)"
                                                                                 if fit.best.down_weighted[i] else "")])
        story += [P("The readings and the recommended model's residual at each:", "small"),
                  table(rows, [18 * mm, 26 * mm, 26 * mm, 30 * mm, 50 * mm], st, font_small=True)]
        down = [i for i in range(len(fit.readings)) if fit.best.down_weighted[i]]
        if down:
            story.append(P("Down-weighted readings: " + ", ".join(
                f"line {fit.readings.rows[i]} (spacing {fit.readings.spacing[i]:g} m)" for i in down) + "."))
    if c.surface_zones:
        story.append(P(f"Surface zones: {len(c.surface_zones)} zone(s) with their own covering; native soil "
                       f"(ρs = {c.soil.top_resistivity:g} Ω·m, Cs = 1) outside them. Cs = 1 − 0.09 (1 − ρ/ρs)/(2 hs + "
                       "0.09) per zone; the coverings enter the limits only, not the solve."))
        rows = [["Zone", "Covering", "Corners (x, y) m"]]
        for z in c.surface_zones:
            corners = ", ".join(f"({x:g}, {y:g})" for x, y in z.area.shell)
            holes = f"; {len(z.area.holes)} hole(s)" if z.area.holes else ""
            rows.append([z.name[:24], covering_text(z), Paragraph(corners + holes, st["small"])])
        story.append(table(rows, [35 * mm, 40 * mm, 95 * mm], st))
    elif c.surface_layer:
        story.append(P(f"Surface layer: {c.surface_layer.resistivity:g} Ω·m, {c.surface_layer.thickness * 1000:.0f} mm; "
                       f"derating factor Cs = 1 − 0.09 (1 − ρ/ρs)/(2 hs + 0.09) = <b>{r.limits.cs:.3f}</b> "
                       f"(ρ = {c.soil.top_resistivity:g} Ω·m). Used in the limits only, not in the solve. "
                       "<b>Assumed to cover the whole map, also outside the fence</b>: where people stand on native "
                       "soil the limits are lower."))
    else:
        story.append(P(f"No surface layer: people stand on the top soil, ρs = {r.limits.surface_resistivity:g} Ω·m, Cs = 1."))
    story.append(P("1.2  Fault and grid current", "h2"))
    xr = "not given (Df = 1)" if f.x_over_r is None else f"{f.x_over_r:g}"
    fault_rows = [["Quantity", "Value", "Note"],
                  ["Fault current 3I0", f"{f.current / 1000:.3f} kA", "symmetrical rms"],
                  ["Split factor Sf", f"{f.split_factor:.4g}", "share into the soil through this grid"],
                  ["X/R", xr, f"at {f.frequency:g} Hz"],
                  ["Clearing time tf", f"{f.clearing_time:g} s", "decrement factor, conductor heating"],
                  ["Decrement factor Df", f"{r.decrement_factor:.4f}", "√(1 + (Ta/tf)(1 − e^(−2tf/Ta))), Ta = (X/R)/(2πf)"],
                  ["Grid current IG", f"{r.grid_current / 1000:.3f} kA", "IG = Df · Sf · 3I0"]]
    if f.is_dc:
        fault_rows[3] = ["X/R", "—", "DC study (frequency 0): resistances only, Df = 1"]
    if f.split_basis:
        fault_rows.append(["Basis", "", Paragraph(f.split_basis, st["small"])])
    if r.current_division is not None:
        for p in r.current_division.paths:
            fault_rows.append([Paragraph(f"Path: {p.name}", st["small"]), f"{abs(p.current) * f.current / 1000:.3f} kA",
                               f"{p.kind}; |Z| = {abs(p.impedance):.3g} Ω, share of 3I0 {abs(p.current):.3f}"])
    story.append(table(fault_rows, [40 * mm, 30 * mm, 100 * mm], st))
    story.append(P("1.3  Criteria and discretisation", "h2"))
    el = c.electrodes
    crit_rows = [["Item", "Value"],
                 ["Body weight (verdicts)", r.body_weights],
                 ["Shock duration ts", f"{f.shock_duration:g} s"],
                 ["Electrodes", f"{len(el.grids)} grid(s), {len(el.conductors)} conductor(s), {len(el.rods)} rod(s); "
                                f"{r.segments.total_length:,.1f} m in all"],
                 ["Material", el.material],
                 ["Discretisation", f"{len(r.segments)} segments, at most {c.discretization.max_segment:g} m"],
                 ["Map", f"margin {c.surface.margin:g} m, spacing {c.surface.resolution:g} m, "
                         f"{len(s.x)} × {len(s.y)} points"],
                 ["Touch area", touch_area_text(c.surface)],
                 ["Step length", f"{c.surface.step_distance:g} m"]]
    story.append(table(crit_rows, [45 * mm, 125 * mm], st))
    if r.warnings:
        story.append(P("Notes on how the geometry was read:", "body"))
        for w in r.warnings:
            story.append(P("• " + w, "small"))
    return story


def plan(ctx: Context) -> list:
    """2 Electrode plan: vector drawing at a standard scale, coordinates, leakage and metal potential, probes."""
    r, st, P, image = ctx.r, ctx.st, ctx.P, ctx.image
    c, s = r.case, r.surface
    story = []
    drawing, scale = plan_drawing(r, 165 * mm, 185 * mm)
    pts = np.vstack([r.segments.start[:, :2], r.segments.end[:, :2]])
    ext = pts.max(axis=0) - pts.min(axis=0)
    story += [PageBreak(), P("2  Electrode plan", "h1"), drawing,
              P(f"Vector drawing at scale 1:{scale:,} when printed at 100 % on A4 (1 m = {1000 / scale:g} mm); "
                f"electrodes {ext[0]:.1f} m × {ext[1]:.1f} m; +y is taken as north. Buried conductors solid blue, "
                "rods dots; separate electrodes dashed (floating orange, tied to remote earth purple, bonded green "
                "dotted), their rods squares; surface zones grey dashed; probes triangles (P1, P2, …)."),
              Spacer(1, 3 * mm)]
    story += [P("2.1  Electrode coordinates (m)", "h2"), table(electrode_rows(c), [42 * mm, 104 * mm, 24 * mm], st,
                                                              font_small=True), Spacer(1, 3 * mm),
              image("leakage", 150 * mm)]
    if ctx.has_figure("metal_potential"):
        story += [P("2.2  Potential of the metal (conductor impedance)", "h2"), image("metal_potential", 150 * mm)]
    if c.probes:
        rows = [["Probe", "x m", "y m", "Surface potential", "Touch voltage"]]
        for k, ((x, y), v, t) in enumerate(zip(c.probes, s.probe_potential, r.probe_touch_voltages()), start=1):
            rows.append([f"P{k}", f"{x:.1f}", f"{y:.1f}", volts(v), volts(t)])
        story.append(table(rows, [20 * mm, 20 * mm, 20 * mm, 40 * mm, 40 * mm], st))
    return story


def results(ctx: Context) -> list:
    """3 Results: grid, verdicts per criterion, zone, scenario and separate electrode, limits, uncertainty, conductor sizing, the simplified method."""
    r, st, P, image = ctx.r, ctx.st, ctx.P, ctx.image
    c, s = r.case, r.surface
    story = []
    err = r.discretization_error
    err_text = (f"± {err.estimate_ohm:.4f} Ω ({err.relative * 100:.2f} %), from Rg at twice the segment length "
                f"({err.coarse_resistance:.4f} Ω)") if err.relative is not None else err.note
    story += [PageBreak(), P("3  Results", "h1"), P("3.1  Grid", "h2"),
              table([["Quantity", "Value", "Note"],
                      *grid_rows(r, err_text, st),
                      ["Solve residual", f"{r.solution.relative_residual:.1e}", "‖R i − v‖ / ‖v‖; " + solver_text(r).rsplit(", relative residual", 1)[0]]],
                     [40 * mm, 30 * mm, 100 * mm], st),
              P("3.2  Touch, step and mesh voltages", "h2"),
              table(verdict_rows(r, st), [30 * mm, 32 * mm, 32 * mm, 18 * mm, 17 * mm, 41 * mm], st, verdict_col=4)]
    if r.limits.standard == "en50522" or len(r.criteria) > 1:
        story.extend(criteria_story(r, st, P))
    story.append(P("± : estimated discretisation error of the worst voltage (the solve at twice the segment "
                   "length re-evaluated at the same point, Richardson's estimate for the refinement ratio made and order p — 1 for grids, 0.4 for rods by their share of the current —, plus the change found "
                   "with a map of twice the spacing; both times 1.25, the factor of safety of Roache's grid "
                   "convergence index). A verdict marked ? has its limit inside that band: it is "
                   "marginal and could flip with a finer model.", "small"))
    if r.scenarios:
        story += [P("Scenarios: conditions the layout must all pass (seasons, a wet surface layer, a future fault "
                    "level); the table above gives the governing scenario of each criterion. Maps and figures show "
                    f"the case as written ('{r.scenario}').", "small"),
                  table(scenario_rows(r), [26 * mm, 22 * mm, 16 * mm, 17 * mm, 27 * mm, 27 * mm, 23 * mm, 12 * mm],
                         st, verdict_col=7), Spacer(1, 2 * mm)]
    if len(r.zones) > 1:
        story += [P("Per zone: each criterion is judged in every zone against the limit of people standing there; "
                    "a step belongs to the zone of its foot with the lower limit.", "small"),
                  table(zone_rows(r), [28 * mm, 33 * mm, 12 * mm, 32 * mm, 32 * mm, 17 * mm, 16 * mm], st,
                         verdict_col=6), Spacer(1, 2 * mm)]
    if r.separate:
        story += [P("Separate electrodes: potential from the solve (floating: zero net current; remote: 0 V); touch "
                    f"= |metal − surface potential| within {c.surface.touch_reach:g} m of the metal; transferred = the "
                    "largest voltage between metal tied to remote earth (0 V) and the ground within reach.", "small"),
                  table(separate_rows(r), [30 * mm, 20 * mm, 38 * mm, 22 * mm, 38 * mm, 22 * mm], st),
                  Spacer(1, 2 * mm)]
    if r.limits.standard == "ieee80":
        story += [P(f"Tolerable limits (Dalziel, IEEE Std 80): touch (1000 + 1.5 Cs ρs)·k/√ts, step (1000 + 6 Cs ρs)·k/√ts; "
                f"50 kg: touch {volts(r.limits.touch[50])}, step {volts(r.limits.step[50])}; "
                f"70 kg: touch {volts(r.limits.touch[70])}, step {volts(r.limits.step[70])}"
                + (f" (governing zone {r.touch_check.zone})." if len(r.zones) > 1 else "."))]
    if r.uncertainty is not None:
        u = r.uncertainty
        rows = [["Quantity", "Computed", "1-σ", "P(limit exceeded)"]]
        for key, label in UNCERTAINTY_LABELS.items():
            q = u.quantities[key]
            if q.value is None or q.sigma is None:
                continue
            unit = (lambda v: f"{v:.4f} Ω") if key == "grid_resistance" else volts
            rows.append([label, unit(q.value), unit(q.sigma),
                         "" if q.probability_exceeds_limit is None else probability_text(q.probability_exceeds_limit)])
        story += [P("Soil uncertainty carried to the verdict", "h2"),
                  P(f"Parameter uncertainty from {u.source}: " + ", ".join(
                      f"{n} ± {math.expm1(sg) * 100:.0f} %" for n, sg in zip(u.parameters, u.sigma_log)) + ". "
                    + (f"Scope: {u.scope}. " if u.scope else "") +
                    f"Model: {u.model}; {u.level}. It cost {u.extra_solves} extra solves. This covers the soil parameters "
                    "only; fault data, the discretisation and the choice of soil model add to it.", "small"),
                  table(rows, [45 * mm, 35 * mm, 35 * mm, 40 * mm], st)]
        story += [P("P(limit exceeded), " + line + ".", "small") for line in shared_probability_lines(u)]
        story += [P(uncertain_pass_text(scenario, name, probability_text(p)), "small")
                  for scenario, name, p in uncertain_passes(r)]
        story += [image("uncertainty", 150 * mm)]
    cc = r.conductor
    el = c.electrodes
    story += [P("3.3  Conductor sizing", "h2"),
              P(f"IEEE Std 80 equation for each conductor's material with the standard's constants; governing: "
                f"{cc.element} ({cc.material or el.material}). The current "
                f"Df · 3I0 = {cc.current_a / 1000:.2f} kA for tf = {_sizing_time(r):g} s"
                + (f" (scenario '{cc.scenario}', the one that needs the most area)" if cc.scenario else "") + ", from Ta = "
                f"{cc.ambient_temperature:g} °C to Tm = {cc.max_temperature:g} °C needs "
                f"<b>{cc.required_area_mm2:.1f} mm²</b>; the smallest conductor has {cc.actual_area_mm2:.1f} mm² "
                f"→ <b>{verdict_word(cc.ok)}</b>. "
                + ("Tm is the fusing temperature: joints usually need a lower limit (give electrodes.max_temperature)."
                   if c.electrodes.max_temperature is None else ""))]
    if r.scenarios:
        story.append(P("Area needed per scenario: " + "; ".join(
            f"{x.scenario}: {x.conductor.required_area_mm2:.1f} mm² ({x.conductor.current_a / 1000:.2f} kA, "
            f"{x.case.fault.clearing_time:g} s) {verdict_word(x.conductor.ok)}" for x in r.scenarios) + ".", "small"))
    simp = r.simplified
    story.append(P("3.4  IEEE Std 80 simplified method beside the numerical result", "h2"))
    if simp.applicable:
        fa = simp.factors
        story.append(table([["Quantity", "Simplified method", "Numerical (this study)"],
                             ["Grid resistance", f"{simp.grid_resistance:.4f} Ω (Sverak)", f"{r.grid_resistance:.4f} Ω"],
                             ["Mesh voltage", f"{volts(simp.mesh_voltage)} (Em)",
                              volts(s.max_mesh.value) if s.max_mesh else "—"],
                             ["Step voltage", f"{volts(simp.step_voltage)} (Es)", volts(s.max_step.value)]],
                            [45 * mm, 55 * mm, 55 * mm], st))
        story.append(P(f"n = {fa['n']:.2f}, Km = {fa['Km']:.4f}, Ki = {fa['Ki']:.3f}, Ks = {fa['Ks']:.4f}, "
                       f"Kii = {fa['Kii']:.3f}, Kh = {fa['Kh']:.3f}, D = {fa['D']:.2f} m, LC = {fa['LC']:.1f} m, "
                       f"LR = {fa['LR']:.1f} m, LM = {fa['LM']:.1f} m, LS = {fa['LS']:.1f} m.", "small"))
    else:
        story.append(P(f"Not applicable: {simp.reason}."))
    return story


def figures(ctx: Context) -> list:
    """4–5 Maps of surface potential, profile, touch and step voltage."""
    P, image = ctx.P, ctx.image
    story = []
    # two figures a page, each with its heading kept on the same page as the figure
    story += [PageBreak(), P("4  Surface potentials", "h1"),
              KeepTogether([P("4.1  Surface potential", "h2"), image("potential", 140 * mm)]),
              KeepTogether([P("4.2  Potential profile", "h2"), image("profile", 150 * mm)]),
              PageBreak(), P("5  Touch and step voltages", "h1"),
              KeepTogether([P("5.1  Touch voltage", "h2"), image("touch", 140 * mm),
                            P("Hatched: touch voltage above the tolerable limit; red line: the limit contour; ✕: the "
                              "worst point (refined by a local search on the exact potential).", "small")]),
              KeepTogether([P("5.2  Step voltage", "h2"), image("step", 140 * mm)])]
    return story


def method(ctx: Context) -> list:
    """6 Method and assumptions, as they ran in this study, and the live validation table."""
    st, P = ctx.st, ctx.P
    story = [PageBreak(), P("6  Method and assumptions", "h1")]
    for text in method_paragraphs(ctx.r):
        story += [P(text), Spacer(1, 1.5 * mm)]
    story.append(P("6.1  Validation (computed now, with the same code)", "h2"))
    rows = [["Check", "Source", "Reference", "Computed", "Deviation", "Accepted"]]
    for ch in validation_checks():
        rows.append([Paragraph(ch.name, st["small"]), Paragraph(ch.source, st["small"]),
                     f"{ch.reference:.4g} {ch.unit}", f"{ch.computed:.4g} {ch.unit}", f"{ch.deviation * 100:+.2f} %",
                     Paragraph(ch.accepted, st["small"])])
    story.append(table(rows, [38 * mm, 32 * mm, 22 * mm, 22 * mm, 18 * mm, 38 * mm], st))
    return story


def review(ctx: Context) -> list:
    """7 The reviewer block: cautions and the fields the reviewer fills in."""
    st, P = ctx.st, ctx.P
    return [KeepTogether([
        P("7  Review", "h1"), caution_box(st), Spacer(1, 4 * mm),
        table([["Reviewer name", ""], ["Licence number", ""], ["Date", ""], ["Signature", ""], ["Remarks", ""]],
              [45 * mm, 125 * mm], st, header=False, row_heights=[9 * mm, 9 * mm, 9 * mm, 16 * mm, 30 * mm])])]


#: The report's sections in order.
SECTIONS = (cover, inputs, plan, results, figures, method, review)
