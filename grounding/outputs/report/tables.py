"""The tables of the review report: verdicts, criteria per standard, electrodes, grid, zones, scenarios and
separate electrodes, as rows of cells."""

from __future__ import annotations

import cmath
import math

from reportlab.lib.units import mm
from reportlab.platypus import (
    Paragraph,
    Spacer,
)

from ...study.result import StudyResult
from ..summary_text import covering_text
from .common import margin, table, verdict_word, volts


def verdict_rows(r: StudyResult, st):
    several = len(r.zones) > 1
    rows = [["Criterion", "Worst computed", "Tolerable", "Margin", "Verdict",
             "Where (x, y) m" + (" / zone" if several else "")]]
    for name, check in (("Touch voltage", r.touch_check), ("Step voltage", r.step_check),
                        ("Mesh voltage", r.mesh_check)):
        if check.worst is None:
            rows.append([name, "—", volts(check.limit), "", verdict_word(check.ok),
                         "no closed mesh" if check.ok is None else "not evaluated"])
            continue
        w = check.worst
        where = f"({w.x:.1f}, {w.y:.1f})" + (f" {check.zone}" if several else "")
        if check.scenario:
            where += f"; {check.scenario}"
        value = volts(w.value) + ("" if check.error is None else f" ± {volts(check.error)}")
        verdict = verdict_word(check.ok) + (" ?" if check.limit_within_error else "")
        rows.append([name, value, volts(check.limit), margin(w.value, check.limit), verdict,
                     Paragraph(where, st["small"])])
    for e in r.separate:
        t = e.touch
        rows.append([f"Touch, {e.name}"[:28], volts(t.worst.value) if t.worst else "—", volts(t.limit),
                     margin(t.worst.value, t.limit) if t.worst else "", verdict_word(t.ok),
                     f"({t.worst.x:.1f}, {t.worst.y:.1f})" + (f" {t.zone}" if several else "") if t.worst else ""])
    c = r.conductor
    rows.append(["Conductor size", f"{c.actual_area_mm2:.1f} mm² fitted", f"{c.required_area_mm2:.1f} mm² needed",
                 margin(c.required_area_mm2, c.actual_area_mm2) if c.actual_area_mm2 else "", verdict_word(c.ok),
                 c.scenario[:28] if c.scenario else ""])
    return rows


def criteria_story(r: StudyResult, st, P) -> list:
    """The standards the study was judged by: EN 50522's basis and every further standard's verdicts."""
    from ...safety.en50522 import BODY_IMPEDANCE_BASIS, UTP_TABLE
    from ...safety.site import STANDARD_NAMES

    out = []
    names = STANDARD_NAMES
    for c in r.criteria:
        if c.standard == "en50522":
            b = c.zones[[z.name for z in c.zones].index(c.touch.zone)].limits.basis
            curve = ", ".join(f"{t:g} s: {u:g} V" for t, u in UTP_TABLE)
            out.append(P(f"EN 50522: permissible touch voltage U_Tp = {volts(b.permissible_touch_voltage_v)} for tf = "
                         f"{b.fault_duration_s:g} s (log–log interpolation of the curve {curve}); body impedance Z_B = "
                         f"{b.body_impedance_ohm:,.0f} Ω ({BODY_IMPEDANCE_BASIS}), body "
                         f"current {b.body_current_a * 1000:.0f} mA; additional resistance R_a = footwear "
                         f"{b.footwear_resistance_ohm:,.0f} Ω + 1.5 m⁻¹ · ρs = {b.surface_resistance_ohm:,.0f} Ω; "
                         f"prospective permissible touch voltage U_vTp = {volts(b.prospective_touch_voltage_v)} in the "
                         f"governing zone. EN 50522 sets no general step limit: the step voltage is reported without "
                         "a verdict. The curve and impedance values were recalled from memory: check them against "
                         "the standards.", "small"))
    if len(r.criteria) > 1:
        rows = [["Standard", "Touch / limit", "Step / limit", "Mesh / limit", "All"]]
        for c in r.criteria:
            def cell(check):
                if check.worst is None:
                    return "—"
                return f"{volts(check.worst.value)} / {volts(check.limit)} {verdict_word(check.ok)}"
            rows.append([names[c.standard], cell(c.touch), cell(c.step), cell(c.mesh), verdict_word(c.passes)])
        out += [P("Each standard asked for, with its own verdicts (the table above is the first one's):", "small"),
                table(rows, [30 * mm, 42 * mm, 42 * mm, 42 * mm, 14 * mm], st, verdict_col=4), Spacer(1, 2 * mm)]
    return out


def size_text(x, default_material: str) -> str:
    size = f"d {x.diameter * 1000:g} mm" + (f", {x.cross_section * 1e6:g} mm²" if x.cross_section else "")
    return size + (f", {x.material}" if x.material and x.material != default_material else "")


def electrode_rows(c) -> list[list[str]]:
    """Every grid, conductor and rod with its coordinates, for a reviewer without the case file."""
    rows = [["Element", "Geometry", "Size"]]
    systems = [("", c.electrodes)] + [(f"{e.name} ({e.connection}): ", e) for e in c.separate_electrodes]

    def label(prefix, x):
        # within a named separate electrode, its own key (conductors[0]) is enough
        return prefix + (x.name or (x.key.split(".", 1)[-1] if prefix else x.key))

    for prefix, el in systems:
        for g in el.grids:
            rows.append([label(prefix, g), f"grid, origin ({g.origin[0]:g}, {g.origin[1]:g}), size "
                         f"{g.size[0]:g} × {g.size[1]:g}, {g.meshes[0]} × {g.meshes[1]} meshes, depth {g.depth:g}",
                         size_text(g, c.electrodes.material)])
        for k in el.conductors:
            rows.append([label(prefix, k), "from ({:g}, {:g}, {:g}) to ({:g}, {:g}, {:g})".format(*k.start, *k.end),
                         size_text(k, c.electrodes.material)])
        for rd in el.rods:
            rows.append([label(prefix, rd), f"rod, top ({rd.top[0]:g}, {rd.top[1]:g}, {rd.top[2]:g}), "
                         f"length {rd.length:g}", size_text(rd, c.electrodes.material)])
    return rows


def grid_rows(r, err_text: str, st) -> list:
    """Rg and GPR (equipotential), or |Zg|, the injection point's GPR and the metal potential (conductor
    impedance); and the potential-drop screening."""
    metal = r.solution.metal
    if metal is None:
        rows = [["Grid resistance Rg", f"{r.grid_resistance:.4f} Ω", err_text],
                ["Ground potential rise", volts(r.ground_potential_rise), "GPR = IG · Rg"]]
    else:
        z = metal.solution.impedance
        lo, _ = metal.fraction(0)
        x, y, zz = metal.network.nodes[metal.solution.injection_nodes[0]]
        rows = [["Grid impedance |Zg|", f"{abs(z):.4f} Ω",
                 Paragraph(f"angle {math.degrees(cmath.phase(z)):.1f}° at the injection point ({x:.1f}, {y:.1f}, "
                           f"{zz:.2f}) m; {err_text}", st["small"])],
                ["GPR at injection", volts(r.ground_potential_rise), "IG · |Zg|"],
                ["Metal potential", f"{100 * lo:.1f} … 100 %",
                 Paragraph("of the injection point's over the energised metal: series impedance modelled "
                           "(resistance, skin effect, Neumann partial inductances); touch = |V_metal − V_surface| "
                           "with the nearest metal's potential", st["small"])]]
    drop = r.metal_drop
    if drop is not None and drop.estimated:
        value = "not estimated" if drop.fraction is None else f"{100 * drop.fraction:.1f} % of GPR"
        flag = "" if drop.fraction is None else ("MAY MATTER (over 2 %): model the conductor impedance. "
                                                 if drop.fraction > 0.02 else "under 2 %: the equipotential model holds. ")
        rows.append(["Metal potential drop", value, Paragraph(flag + drop.note, st["small"])])
    return rows


def touch_area_text(surface) -> str:
    if not surface.touch_areas:
        return f"grid meshes plus {surface.touch_reach:g} m around every conductor and rod of the main system"
    parts = []
    for t in surface.touch_areas:
        if t.area is not None:
            parts.append(f"polygon of {len(t.area.shell)} corners" + (f" with {len(t.area.holes)} hole(s)"
                                                                      if t.area.holes else ""))
        else:
            parts.append(f"{t.reach:g} m around " + (", ".join(t.metal) if t.metal else "all main-system metal"))
    return "; ".join(parts)


def zone_rows(r: StudyResult):
    rows = [["Zone", "Covering", "Cs", "Touch / limit", "Step / limit", "Mesh", "Verdict"]]
    for z in r.zones:
        e = z.extremes
        oks = [z.ok(k) for k in ("touch", "step", "mesh") if z.ok(k) is not None]
        rows.append([z.label(24), covering_text(z.zone), f"{z.limits.cs:.3f}",
                     f"{volts(e.touch.value) if e.touch else '—'} / {volts(z.tolerable_touch)}",
                     f"{volts(e.step.value) if e.step else '—'} / {volts(z.tolerable_step)}",
                     volts(e.mesh.value) if e.mesh else "—", verdict_word(all(oks)) if oks else "n/a"])
    return rows


def scenario_rows(r: StudyResult):
    def short(check):
        if check.worst is None:
            return "—" if check.ok is None else "not evaluated"
        return f"{volts(check.worst.value)} / {volts(check.limit)}"

    rows = [["Scenario", "Replaces", "Rg", "GPR", "Touch / limit", "Step / limit", "Mesh / limit", "All"]]
    over = {sc.name: ("without " + ", ".join(sc.without) + " (not relied on)") if sc.without else
            ", ".join(sc.overrides).replace("_", " ") for sc in r.case.scenarios}
    for x in r.scenarios:
        rows.append([x.scenario[:20], over.get(x.scenario, "—"), f"{x.grid_resistance:.3f} Ω",
                     volts(x.ground_potential_rise), short(x.touch_check), short(x.step_check), short(x.mesh_check),
                     verdict_word(x.passes)])
    return rows


def separate_rows(r: StudyResult):
    rows = [["Electrode", "Connection", "Potential", "Net current", "Touch / limit", "Transferred"]]
    for e in r.separate:
        t = e.touch
        rows.append([e.name[:24], e.connection, f"{volts(e.potential)} ({e.potential_fraction * 100:.0f} % GPR)",
                     "0 (floating)" if e.connection == "floating" else f"{e.net_current / 1000:+.3f} kA",
                     f"{volts(t.worst.value) if t.worst else '—'} / {volts(t.limit)} {verdict_word(t.ok)}",
                     volts(e.transferred_voltage) if e.transferred_voltage is not None else "—"])
    return rows

