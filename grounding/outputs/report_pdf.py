"""The review report: a self-contained PDF a licensed reviewer can check line by line.

Sections: cover (identity, verdicts, cautions), inputs, plan, results, figures, method and
assumptions with a live validation table, and a reviewer block. Cautions stand in the footer of every
page. The PDF is built in memory and written atomically; with the same case and date it is
byte-for-byte reproducible.
"""

from __future__ import annotations

import cmath
import datetime as _dt
import io
import math
from pathlib import Path

import matplotlib
import numpy as np
from reportlab.lib import colors
from reportlab.lib.enums import TA_LEFT
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm
from reportlab.pdfbase import pdfmetrics
from reportlab.pdfbase.ttfonts import TTFont
from reportlab.platypus import (
    BaseDocTemplate,
    Frame,
    Image,
    KeepTogether,
    PageBreak,
    PageTemplate,
    Paragraph,
    Spacer,
    Table,
    TableStyle,
)

from ..cautions import CAUTIONS
from ..study.result import StudyResult
from ..study.validation import validation_checks
from ..version import __version__
from .figures import all_figures, png_bytes
from .plan_vector import plan_drawing
from .summary_text import UNCERTAINTY_LABELS, covering_text, soil_text, solver_text

INK = colors.HexColor("#1c2833")
ACCENT = colors.HexColor("#1f3b73")
WARN = colors.HexColor("#b03a2e")
PALE = colors.HexColor("#eef1f6")
FAIL_BG = colors.HexColor("#f6dcd8")
PASS_BG = colors.HexColor("#dcefe0")


def _register_fonts() -> tuple[str, str]:
    """DejaVu Sans (shipped with matplotlib) covers Ω, ρ, ², √ and the other symbols of the report."""
    if "DejaVuSans" not in pdfmetrics.getRegisteredFontNames():
        base = Path(matplotlib.get_data_path()) / "fonts" / "ttf"
        pdfmetrics.registerFont(TTFont("DejaVuSans", str(base / "DejaVuSans.ttf")))
        pdfmetrics.registerFont(TTFont("DejaVuSans-Bold", str(base / "DejaVuSans-Bold.ttf")))
    return "DejaVuSans", "DejaVuSans-Bold"


def _styles():
    reg, bold = _register_fonts()
    s = {
        "body": ParagraphStyle("body", fontName=reg, fontSize=9, leading=12, textColor=INK, alignment=TA_LEFT),
        "small": ParagraphStyle("small", fontName=reg, fontSize=7.5, leading=9.5, textColor=INK),
        "h1": ParagraphStyle("h1", fontName=bold, fontSize=14, leading=18, textColor=ACCENT, spaceBefore=6,
                             spaceAfter=6),
        "h2": ParagraphStyle("h2", fontName=bold, fontSize=11, leading=14, textColor=ACCENT, spaceBefore=8,
                             spaceAfter=4),
        "title": ParagraphStyle("title", fontName=bold, fontSize=20, leading=25, textColor=INK, spaceAfter=4),
        "subtitle": ParagraphStyle("subtitle", fontName=reg, fontSize=11, leading=15, textColor=INK),
        "caution": ParagraphStyle("caution", fontName=reg, fontSize=9, leading=12, textColor=WARN),
    }
    s["reg"], s["bold"] = reg, bold
    return s


def _v(x: float | None) -> str:
    if x is None:
        return "none"                      # a limit the standard does not set
    return f"{x / 1000:,.2f} kV" if abs(x) >= 10_000 else f"{x:,.0f} V"


def _table(rows, widths, st, header=True, verdict_col=None, row_heights=None, font_small=False):
    size = 7.5 if font_small else 8.5
    style = [
        ("FONT", (0, 0), (-1, -1), st["reg"], size),
        ("TEXTCOLOR", (0, 0), (-1, -1), INK),
        ("VALIGN", (0, 0), (-1, -1), "MIDDLE"),
        ("LINEBELOW", (0, 0), (-1, -1), 0.25, colors.HexColor("#c5cbd3")),
        ("TOPPADDING", (0, 0), (-1, -1), 2.5),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 2.5),
    ]
    if header:
        style += [("FONT", (0, 0), (-1, 0), st["bold"], size), ("BACKGROUND", (0, 0), (-1, 0), PALE),
                  ("LINEBELOW", (0, 0), (-1, 0), 0.8, ACCENT)]
    if verdict_col is not None:
        for i, row in enumerate(rows[1:] if header else rows, start=1 if header else 0):
            cell = str(row[verdict_col])
            if cell.startswith("FAIL"):
                style.append(("BACKGROUND", (verdict_col, i), (verdict_col, i), FAIL_BG))
            elif cell.startswith("PASS"):
                style.append(("BACKGROUND", (verdict_col, i), (verdict_col, i), PASS_BG))
    # long text wraps inside its column instead of running past the margin
    cell_style = ParagraphStyle("cell", fontName=st["reg"], fontSize=size, leading=size + 2, textColor=INK)
    rows = [[Paragraph(c, cell_style) if isinstance(c, str) and len(c) * 1.55 * mm > w else c
             for c, w in zip(row, widths)] for row in rows]
    t = Table(rows, colWidths=widths, rowHeights=row_heights, hAlign="LEFT", repeatRows=1 if header else 0)
    t.setStyle(TableStyle(style))
    return t


def _caution_box(st):
    paras = [Paragraph("<b>CAUTION</b>", st["caution"])] + [Paragraph("• " + c, st["caution"]) for c in CAUTIONS]
    t = Table([[p] for p in paras], colWidths=[170 * mm])
    t.setStyle(TableStyle([("BOX", (0, 0), (-1, -1), 1.2, WARN), ("BACKGROUND", (0, 0), (-1, -1),
                                                                      colors.HexColor("#fdf2f0")),
                           ("TOPPADDING", (0, 0), (-1, -1), 2), ("BOTTOMPADDING", (0, 0), (-1, -1), 2),
                           ("LEFTPADDING", (0, 0), (-1, -1), 6)]))
    return t


def _pm(u: float) -> str:
    """A relative 1-σ as ±x %, or 'unresolved' where the readings do not resolve the parameter (as the terminal)."""
    return "unresolved" if not u < 1.0 else f"±{u * 100:.0f}%"


def _verdict(ok):
    return "n/a" if ok is None else ("PASS" if ok else "FAIL")


def _margin(value, limit):
    return "" if limit is None else f"{(limit - value) / limit * 100:+.0f} %"


def _verdict_rows(r: StudyResult, st):
    several = len(r.zones) > 1
    rows = [["Criterion", "Worst computed", "Tolerable", "Margin", "Verdict",
             "Where (x, y) m" + (" / zone" if several else "")]]
    for name, check in (("Touch voltage", r.touch_check), ("Step voltage", r.step_check),
                        ("Mesh voltage", r.mesh_check)):
        if check.worst is None:
            rows.append([name, "—", _v(check.limit), "", _verdict(check.ok),
                         "no closed mesh" if check.ok is None else "not evaluated"])
            continue
        w = check.worst
        where = f"({w.x:.1f}, {w.y:.1f})" + (f" {check.zone}" if several else "")
        if check.scenario:
            where += f"; {check.scenario}"
        value = _v(w.value) + ("" if check.error is None else f" ± {_v(check.error)}")
        verdict = _verdict(check.ok) + (" ?" if check.limit_within_error else "")
        rows.append([name, value, _v(check.limit), _margin(w.value, check.limit), verdict,
                     Paragraph(where, st["small"])])
    for e in r.separate:
        t = e.touch
        rows.append([f"Touch, {e.name}"[:28], _v(t.worst.value) if t.worst else "—", _v(t.limit),
                     _margin(t.worst.value, t.limit) if t.worst else "", _verdict(t.ok),
                     f"({t.worst.x:.1f}, {t.worst.y:.1f})" + (f" {t.zone}" if several else "") if t.worst else ""])
    c = r.conductor
    rows.append(["Conductor size", f"{c.actual_area_mm2:.1f} mm² fitted", f"{c.required_area_mm2:.1f} mm² needed",
                 _margin(c.required_area_mm2, c.actual_area_mm2) if c.actual_area_mm2 else "", _verdict(c.ok), ""])
    return rows


def _criteria_story(r: StudyResult, st, P) -> list:
    """The standards the study was judged by: EN 50522's basis and every further standard's verdicts."""
    from ..safety.en50522 import UTP_TABLE

    out = []
    names = {"ieee80": "IEEE Std 80", "en50522": "EN 50522"}
    for c in r.criteria:
        if c.standard == "en50522":
            b = c.zones[[z.name for z in c.zones].index(c.touch.zone)].limits.basis
            curve = ", ".join(f"{t:g} s: {u:g} V" for t, u in UTP_TABLE)
            out.append(P(f"EN 50522: permissible touch voltage U_Tp = {_v(b.permissible_touch_voltage_v)} for tf = "
                         f"{b.fault_duration_s:g} s (log–log interpolation of the curve {curve}); body impedance Z_B = "
                         f"{b.body_impedance_ohm:,.0f} Ω (IEC/TS 60479-1 Table 1, hand to hand, 50 %, dry), body "
                         f"current {b.body_current_a * 1000:.0f} mA; additional resistance R_a = footwear "
                         f"{b.footwear_resistance_ohm:,.0f} Ω + 1.5 m⁻¹ · ρs = {b.surface_resistance_ohm:,.0f} Ω; "
                         f"prospective permissible touch voltage U_vTp = {_v(b.prospective_touch_voltage_v)} in the "
                         f"governing zone. EN 50522 sets no general step limit: the step voltage is reported without "
                         "a verdict. The curve and impedance values were recalled from memory: check them against "
                         "the standards.", "small"))
    if len(r.criteria) > 1:
        rows = [["Standard", "Touch / limit", "Step / limit", "Mesh / limit", "All"]]
        for c in r.criteria:
            def cell(check):
                if check.worst is None:
                    return "—"
                return f"{_v(check.worst.value)} / {_v(check.limit)} {_verdict(check.ok)}"
            rows.append([names[c.standard], cell(c.touch), cell(c.step), cell(c.mesh), _verdict(c.passes)])
        out += [P("Each standard asked for, with its own verdicts (the table above is the first one's):", "small"),
                _table(rows, [30 * mm, 42 * mm, 42 * mm, 42 * mm, 14 * mm], st, verdict_col=4), Spacer(1, 2 * mm)]
    return out


def _size_text(x, default_material: str) -> str:
    size = f"d {x.diameter * 1000:g} mm" + (f", {x.cross_section * 1e6:g} mm²" if x.cross_section else "")
    return size + (f", {x.material}" if x.material and x.material != default_material else "")


def _electrode_rows(c) -> list[list[str]]:
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
                         _size_text(g, c.electrodes.material)])
        for k in el.conductors:
            rows.append([label(prefix, k), "from ({:g}, {:g}, {:g}) to ({:g}, {:g}, {:g})".format(*k.start, *k.end),
                         _size_text(k, c.electrodes.material)])
        for rd in el.rods:
            rows.append([label(prefix, rd), f"rod, top ({rd.top[0]:g}, {rd.top[1]:g}, {rd.top[2]:g}), "
                         f"length {rd.length:g}", _size_text(rd, c.electrodes.material)])
    return rows


def _grid_rows(r, err_text: str, st) -> list:
    """Rg and GPR (equipotential), or |Zg|, the injection point's GPR and the metal potential (conductor
    impedance); and the potential-drop screening."""
    metal = r.solution.metal
    if metal is None:
        rows = [["Grid resistance Rg", f"{r.grid_resistance:.4f} Ω", err_text],
                ["Ground potential rise", _v(r.ground_potential_rise), "GPR = IG · Rg"]]
    else:
        z = metal.solution.impedance
        lo, _ = metal.fraction(0)
        x, y, zz = metal.network.nodes[metal.solution.injection_nodes[0]]
        rows = [["Grid impedance |Zg|", f"{abs(z):.4f} Ω",
                 Paragraph(f"angle {math.degrees(cmath.phase(z)):.1f}° at the injection point ({x:.1f}, {y:.1f}, "
                           f"{zz:.2f}) m; {err_text}", st["small"])],
                ["GPR at injection", _v(r.ground_potential_rise), "IG · |Zg|"],
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


def _touch_area_text(surface) -> str:
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


def _zone_rows(r: StudyResult):
    rows = [["Zone", "Covering", "Cs", "Touch / limit", "Step / limit", "Mesh", "Verdict"]]
    for z in r.zones:
        e = z.extremes
        oks = [z.ok(k) for k in ("touch", "step", "mesh") if z.ok(k) is not None]
        rows.append([z.name[:24], covering_text(z.zone), f"{z.limits.cs:.3f}",
                     f"{_v(e.touch.value) if e.touch else '—'} / {_v(z.tolerable_touch)}",
                     f"{_v(e.step.value) if e.step else '—'} / {_v(z.tolerable_step)}",
                     _v(e.mesh.value) if e.mesh else "—", _verdict(all(oks)) if oks else "n/a"])
    return rows


def _scenario_rows(r: StudyResult):
    def short(check):
        if check.worst is None:
            return "—" if check.ok is None else "not evaluated"
        return f"{_v(check.worst.value)} / {_v(check.limit)}"

    rows = [["Scenario", "Replaces", "Rg", "GPR", "Touch / limit", "Step / limit", "Mesh / limit", "All"]]
    over = {sc.name: ", ".join(sc.overrides) for sc in r.case.scenarios}
    for x in r.scenarios:
        rows.append([x.scenario[:20], over.get(x.scenario, "—"), f"{x.grid_resistance:.3f} Ω",
                     _v(x.ground_potential_rise), short(x.touch_check), short(x.step_check), short(x.mesh_check),
                     _verdict(x.passes)])
    return rows


def _separate_rows(r: StudyResult):
    rows = [["Electrode", "Connection", "Potential", "Net current", "Touch / limit", "Transferred"]]
    for e in r.separate:
        t = e.touch
        rows.append([e.name[:24], e.connection, f"{_v(e.potential)} ({e.potential_fraction * 100:.0f} % GPR)",
                     "0 (floating)" if e.connection == "floating" else f"{e.net_current / 1000:+.3f} kA",
                     f"{_v(t.worst.value) if t.worst else '—'} / {_v(t.limit)} {_verdict(t.ok)}",
                     _v(e.transferred_voltage) if e.transferred_voltage is not None else "—"])
    return rows


def build_report(r: StudyResult, date: str | None = None) -> bytes:
    """The review report as PDF bytes.

    Parameters
    ----------
    r : StudyResult
        A finished study.
    date : str, optional
        Report date (ISO); default today (UTC). The only content that changes between runs.
    """
    st = _styles()
    date = date or _dt.datetime.now(_dt.timezone.utc).date().isoformat()
    c, f, s = r.case, r.case.fault, r.surface
    buf = io.BytesIO()

    def decorate(canvas, doc):
        canvas.saveState()
        w, h = A4
        # metadata: creation date = the study date on the cover (still byte-identical for the same date),
        # the tool and its version as producer
        stamp = "D:" + date.replace("-", "")[:8].ljust(8, "0") + "000000+00'00'"
        canvas._doc.info._dateFormatter = lambda *args: stamp
        canvas._doc.info.producer = f"grounding {__version__}"
        canvas.setStrokeColor(ACCENT)
        canvas.setLineWidth(1.5)
        canvas.line(18 * mm, h - 14 * mm, w - 18 * mm, h - 14 * mm)
        canvas.setFont(st["bold"], 8)
        canvas.setFillColor(ACCENT)
        canvas.drawString(18 * mm, h - 12 * mm, "EARTHING GRID STUDY · REVIEW COPY")
        canvas.setFont(st["reg"], 8)
        left = canvas.stringWidth("EARTHING GRID STUDY · REVIEW COPY", st["bold"], 8) + 6 * mm
        title, tail = c.title, f" · page {doc.page}"
        while title and canvas.stringWidth(title + tail, st["reg"], 8) > w - 36 * mm - left:
            title = title[:-2].rstrip() + "…"                 # shortened to leave the left label clear
        canvas.drawRightString(w - 18 * mm, h - 12 * mm, title + tail)
        canvas.setStrokeColor(WARN)
        canvas.setLineWidth(0.8)
        canvas.line(18 * mm, 17 * mm, w - 18 * mm, 17 * mm)
        canvas.setFillColor(WARN)
        canvas.setFont(st["reg"], 6.6)
        canvas.drawString(18 * mm, 13.5 * mm, "CAUTION: preliminary study aid only. Results must be reviewed by a "
                          "licensed professional engineer and checked against local codes and the")
        canvas.drawString(18 * mm, 10.5 * mm, "utility's practice. Soil and fault data dominate the answer. "
                          f"Case SHA-256 {c.sha256[:16]}… · grounding {__version__} · {date}")
        canvas.restoreState()

    doc = BaseDocTemplate(buf, pagesize=A4, leftMargin=20 * mm, rightMargin=20 * mm, topMargin=20 * mm,
                          bottomMargin=22 * mm, title=f"Earthing grid study: {c.title}", author="",
                          subject="Earthing grid study for review", creator=f"grounding {__version__}",
                          invariant=1)
    frame = Frame(doc.leftMargin, doc.bottomMargin, doc.width, doc.height, id="body")
    doc.addPageTemplates([PageTemplate(id="page", frames=[frame], onPage=decorate)])
    P = lambda text, style="body": Paragraph(text, st[style])  # noqa: E731
    story = []

    # ---- cover -------------------------------------------------------------------------------
    story += [Spacer(1, 8 * mm), P("Earthing grid study", "subtitle"), P(c.title, "title")]
    ident = [["Site", c.site or "—"], ["Date", date], ["Tool", f"grounding {__version__}"],
             ["Case file", c.source], ["Case SHA-256", c.sha256]]
    if c.electrodes.drawing is not None:
        ident.append(["Drawing file", c.electrodes.drawing[0]])
        ident.append(["Drawing SHA-256", c.electrodes.drawing[1]])
    if c.soil_fit is not None:
        ident.append(["Readings file", c.soil_fit.readings.source])
        ident.append(["Readings SHA-256", c.soil_fit.readings.sha256])
    story += [Spacer(1, 4 * mm), _table(ident, [35 * mm, 135 * mm], st, header=False), Spacer(1, 6 * mm)]
    overall = r.passes
    story.append(P(f"<b>Overall: {'all criteria PASS' if overall else 'at least one criterion FAILS'}</b> "
                   + (f"(IEEE Std 80, {r.body_weight} kg body, ts = {f.shock_duration:g} s)"
                      if c.criteria.standards[0] == "ieee80" else
                      f"(EN 50522, tf = {f.shock_duration:g} s, footwear {c.criteria.footwear_resistance:g} Ω)")
                   + (" — further standards in section 3.2" if len(c.criteria.standards) > 1 else ""), "h2"))
    story += [_table(_verdict_rows(r, st), [30 * mm, 32 * mm, 32 * mm, 18 * mm, 17 * mm, 41 * mm], st, verdict_col=4),
              Spacer(1, 4 * mm)]
    story.append(P(f"Grid resistance Rg = <b>{r.grid_resistance:.4f} Ω</b>; grid current IG = "
                   f"<b>{r.grid_current / 1000:.3f} kA</b>; ground potential rise GPR = <b>{_v(r.ground_potential_rise)}</b>."))
    story += [Spacer(1, 6 * mm), _caution_box(st), PageBreak()]

    # ---- 1 inputs ------------------------------------------------------------------------------
    story.append(P("1  Inputs", "h1"))
    story.append(P("1.1  Soil and surface layer", "h2"))
    soil_rows = [["Layer", "Resistivity", "Thickness"]]
    for i, layer in enumerate(c.soil.layers, start=1):
        soil_rows.append([str(i), f"{layer.resistivity:.4g} Ω·m",
                          f"{layer.thickness:.3g} m" if layer.thickness else "to infinite depth"])
    story.append(_table(soil_rows, [20 * mm, 40 * mm, 50 * mm], st))
    story.append(P(f"Model: {soil_text(c)}."))
    if c.soil_fit is not None:
        fit = c.soil_fit
        story.append(P(f"Fitted from the {fit.readings.array} sounding <b>{fit.readings.source}</b> "
                       f"({len(fit.readings)} readings; apparent resistivity: {fit.readings.conversion}). "
                       f"Recommended {fit.recommended}-layer model, RMS misfit {fit.best.rms_misfit_percent:.1f} %: "
                       f"{fit.reason}."))
        rows = [["Model", "Layers (ρ Ω·m / h m, 1-σ)", "RMS misfit", "BIC"]]
        for n, m in sorted(fit.models.items()):
            desc = "; ".join(f"{l.resistivity:.0f} {_pm(l.resistivity_uncertainty)}"
                             + (f" / {l.thickness:.2f} {_pm(l.thickness_uncertainty)}"
                                if l.thickness is not None else "") for l in m.layers)
            rows.append([f"{n}-layer{' ✓' if n == fit.recommended else ''}", Paragraph(desc, st["small"]),
                         f"{m.rms_misfit_percent:.1f} %", f"{m.bic:.1f}"])
        story.append(_table(rows, [22 * mm, 105 * mm, 22 * mm, 20 * mm], st))
        from .soil_outputs import fit_figure
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
                  _table(rows, [18 * mm, 26 * mm, 26 * mm, 30 * mm, 50 * mm], st, font_small=True)]
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
        story.append(_table(rows, [35 * mm, 40 * mm, 95 * mm], st))
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
    story.append(_table(fault_rows, [40 * mm, 30 * mm, 100 * mm], st))
    story.append(P("1.3  Criteria and discretisation", "h2"))
    el = c.electrodes
    crit_rows = [["Item", "Value"],
                 ["Body weight (verdicts)", f"{c.criteria.body_weight} kg"],
                 ["Shock duration ts", f"{f.shock_duration:g} s"],
                 ["Electrodes", f"{len(el.grids)} grid(s), {len(el.conductors)} conductor(s), {len(el.rods)} rod(s); "
                                f"{r.segments.total_length:,.1f} m in all"],
                 ["Material", el.material],
                 ["Discretisation", f"{len(r.segments)} segments, at most {c.discretization.max_segment:g} m"],
                 ["Map", f"margin {c.surface.margin:g} m, spacing {c.surface.resolution:g} m, "
                         f"{len(s.x)} × {len(s.y)} points"],
                 ["Touch area", _touch_area_text(c.surface)],
                 ["Step length", f"{c.surface.step_distance:g} m"]]
    story.append(_table(crit_rows, [45 * mm, 125 * mm], st))
    if r.warnings:
        story.append(P("Notes on how the geometry was read:", "body"))
        for w in r.warnings:
            story.append(P("• " + w, "small"))

    # ---- 2 plan -------------------------------------------------------------------------------
    figs = {fig.name: fig for fig in all_figures(r)}

    def image(name, width=165 * mm):
        fig = figs[name].figure
        wi, hi = fig.get_size_inches()
        return Image(io.BytesIO(png_bytes(fig)), width=width, height=width * hi / wi)

    drawing, scale = plan_drawing(r, 165 * mm, 185 * mm)
    pts = np.vstack([r.segments.start[:, :2], r.segments.end[:, :2]])
    ext = pts.max(axis=0) - pts.min(axis=0)
    story += [PageBreak(), P("2  Electrode plan", "h1"), drawing,
              P(f"Vector drawing at scale 1:{scale:,} when printed at 100 % on A4 (1 m = {1000 / scale:g} mm); "
                f"electrodes {ext[0]:.1f} m × {ext[1]:.1f} m; +y is taken as north. Buried conductors solid blue, "
                "rods dots; separate electrodes dashed (floating orange, tied to remote earth purple, bonded green "
                "dotted), their rods squares; surface zones grey dashed; probes triangles (P1, P2, …)."),
              Spacer(1, 3 * mm)]
    story += [P("2.1  Electrode coordinates (m)", "h2"), _table(_electrode_rows(c), [42 * mm, 104 * mm, 24 * mm], st,
                                                              font_small=True), Spacer(1, 3 * mm),
              image("leakage", 150 * mm)]
    if "metal_potential" in figs:
        story += [P("2.2  Potential of the metal (conductor impedance)", "h2"), image("metal_potential", 150 * mm)]
    if c.probes:
        rows = [["Probe", "x m", "y m", "Surface potential", "Touch voltage"]]
        for k, ((x, y), v, t) in enumerate(zip(c.probes, s.probe_potential, r.probe_touch_voltages()), start=1):
            rows.append([f"P{k}", f"{x:.1f}", f"{y:.1f}", _v(v), _v(t)])
        story.append(_table(rows, [20 * mm, 20 * mm, 20 * mm, 40 * mm, 40 * mm], st))

    # ---- 3 results ----------------------------------------------------------------------------
    err = r.discretization_error
    err_text = (f"± {err.estimate_ohm:.4f} Ω ({err.relative * 100:.2f} %), from Rg at twice the segment length "
                f"({err.coarse_resistance:.4f} Ω)") if err.relative is not None else err.note
    story += [PageBreak(), P("3  Results", "h1"), P("3.1  Grid", "h2"),
              _table([["Quantity", "Value", "Note"],
                      *_grid_rows(r, err_text, st),
                      ["Solve residual", f"{r.solution.relative_residual:.1e}", "‖R i − v‖ / ‖v‖; " + solver_text(r).rsplit(", relative residual", 1)[0]]],
                     [40 * mm, 30 * mm, 100 * mm], st),
              P("3.2  Touch, step and mesh voltages", "h2"),
              _table(_verdict_rows(r, st), [30 * mm, 32 * mm, 32 * mm, 18 * mm, 17 * mm, 41 * mm], st, verdict_col=4)]
    if r.limits.standard == "en50522" or len(r.criteria) > 1:
        story.extend(_criteria_story(r, st, P))
    story.append(P("± : estimated discretisation error of the worst voltage (the solve at twice the segment "
                   "length re-evaluated at the same point, first-order Richardson estimate, plus the change found "
                   "with a map of twice the spacing). A verdict marked ? has its limit inside that band: it is "
                   "marginal and could flip with a finer model.", "small"))
    if r.scenarios:
        story += [P("Scenarios: conditions the layout must all pass (seasons, a wet surface layer, a future fault "
                    "level); the table above gives the governing scenario of each criterion. Maps and figures show "
                    f"the case as written ('{r.scenario}').", "small"),
                  _table(_scenario_rows(r), [26 * mm, 22 * mm, 16 * mm, 17 * mm, 27 * mm, 27 * mm, 23 * mm, 12 * mm],
                         st, verdict_col=7), Spacer(1, 2 * mm)]
    if len(r.zones) > 1:
        story += [P("Per zone: each criterion is judged in every zone against the limit of people standing there; "
                    "a step belongs to the zone of its foot with the lower limit.", "small"),
                  _table(_zone_rows(r), [28 * mm, 33 * mm, 12 * mm, 32 * mm, 32 * mm, 17 * mm, 16 * mm], st,
                         verdict_col=6), Spacer(1, 2 * mm)]
    if r.separate:
        story += [P("Separate electrodes: potential from the solve (floating: zero net current; remote: 0 V); touch "
                    f"= |metal − surface potential| within {c.surface.touch_reach:g} m of the metal; transferred = the "
                    "largest voltage between metal tied to remote earth (0 V) and the ground within reach.", "small"),
                  _table(_separate_rows(r), [30 * mm, 20 * mm, 38 * mm, 22 * mm, 38 * mm, 22 * mm], st),
                  Spacer(1, 2 * mm)]
    if r.limits.standard == "ieee80":
        story += [P(f"Tolerable limits (Dalziel, IEEE Std 80): touch (1000 + 1.5 Cs ρs)·k/√ts, step (1000 + 6 Cs ρs)·k/√ts; "
                f"50 kg: touch {_v(r.limits.touch[50])}, step {_v(r.limits.step[50])}; "
                f"70 kg: touch {_v(r.limits.touch[70])}, step {_v(r.limits.step[70])}"
                + (f" (governing zone {r.touch_check.zone})." if len(r.zones) > 1 else "."))]
    if r.uncertainty is not None:
        u = r.uncertainty
        rows = [["Quantity", "Computed", "1-σ", "P(limit exceeded)"]]
        for key, label in UNCERTAINTY_LABELS.items():
            q = u.quantities[key]
            if q.value is None or q.sigma is None:
                continue
            unit = (lambda v: f"{v:.4f} Ω") if key == "grid_resistance" else _v
            rows.append([label, unit(q.value), unit(q.sigma),
                         "" if q.probability_exceeds_limit is None else f"{q.probability_exceeds_limit * 100:.2f} %"])
        story += [P("Soil uncertainty carried to the verdict", "h2"),
                  P(f"Parameter uncertainty from {u.source}: " + ", ".join(
                      f"{n} ± {math.expm1(sg) * 100:.0f} %" for n, sg in zip(u.parameters, u.sigma_log)) + ". "
                    f"Model: {u.model}. It cost {u.extra_solves} extra solves. This covers the soil parameters "
                    "only; fault data, the discretisation and the choice of soil model add to it.", "small"),
                  _table(rows, [45 * mm, 35 * mm, 35 * mm, 40 * mm], st), image("uncertainty", 150 * mm)]
    cc = r.conductor
    story += [P("3.3  Conductor sizing", "h2"),
              P(f"IEEE Std 80 equation for each conductor's material with the standard's constants; governing: "
                f"{cc.element} ({cc.material or el.material}). The current "
                f"Df · 3I0 = {cc.current_a / 1000:.2f} kA for tf = {f.clearing_time:g} s, from Ta = "
                f"{cc.ambient_temperature:g} °C to Tm = {cc.max_temperature:g} °C needs "
                f"<b>{cc.required_area_mm2:.1f} mm²</b>; the smallest conductor has {cc.actual_area_mm2:.1f} mm² "
                f"→ <b>{_verdict(cc.ok)}</b>. "
                + ("Tm is the fusing temperature: joints usually need a lower limit (give electrodes.max_temperature)."
                   if c.electrodes.max_temperature is None else ""))]
    simp = r.simplified
    story.append(P("3.4  IEEE Std 80 simplified method beside the numerical result", "h2"))
    if simp.applicable:
        fa = simp.factors
        story.append(_table([["Quantity", "Simplified method", "Numerical (this study)"],
                             ["Grid resistance", f"{simp.grid_resistance:.4f} Ω (Sverak)", f"{r.grid_resistance:.4f} Ω"],
                             ["Mesh voltage", f"{_v(simp.mesh_voltage)} (Em)",
                              _v(s.max_mesh.value) if s.max_mesh else "—"],
                             ["Step voltage", f"{_v(simp.step_voltage)} (Es)", _v(s.max_step.value)]],
                            [45 * mm, 55 * mm, 55 * mm], st))
        story.append(P(f"n = {fa['n']:.2f}, Km = {fa['Km']:.4f}, Ki = {fa['Ki']:.3f}, Ks = {fa['Ks']:.4f}, "
                       f"Kii = {fa['Kii']:.3f}, Kh = {fa['Kh']:.3f}, D = {fa['D']:.2f} m, LC = {fa['LC']:.1f} m, "
                       f"LR = {fa['LR']:.1f} m, LM = {fa['LM']:.1f} m, LS = {fa['LS']:.1f} m.", "small"))
    else:
        story.append(P(f"Not applicable: {simp.reason}."))

    # ---- 4 figures ----------------------------------------------------------------------------
    # two figures a page, each with its heading kept on the same page as the figure
    story += [PageBreak(), P("4  Surface potentials", "h1"),
              KeepTogether([P("4.1  Surface potential", "h2"), image("potential", 140 * mm)]),
              KeepTogether([P("4.2  Potential profile", "h2"), image("profile", 150 * mm)]),
              PageBreak(), P("5  Touch and step voltages", "h1"),
              KeepTogether([P("5.1  Touch voltage", "h2"), image("touch", 140 * mm),
                            P("Hatched: touch voltage above the tolerable limit; red line: the limit contour; ✕: the "
                              "worst point (refined by a local search on the exact potential).", "small")]),
              KeepTogether([P("5.2  Step voltage", "h2"), image("step", 140 * mm)])]

    # ---- 6 method -----------------------------------------------------------------------------
    story += [PageBreak(), P("6  Method and assumptions", "h1")]
    for text in (
        "The electrodes form one equipotential body at the GPR. The soil is a half-space under insulating air, "
        "uniform or in horizontal layers; the surface layer enters the limits only. Conductors are thin wires; "
        "each segment leaks a constant current, the unknowns of a Galerkin method of moments: "
        "R<sub>ij</sub> = 1/(L<sub>i</sub>L<sub>j</sub>) ∫∫ G ds ds′, R i = V, solved by Cholesky factorisation.",
        "Kernel G: uniform soil with the surface image; two-layer soil by the image series of Sunde (1949) and "
        "Tagg (1964), truncated at a relative tail of 1e-6. Near pairs are integrated exactly (closed form for "
        "parallel wires, end-clustered Gauss–Legendre otherwise), far pairs at midpoints.",
        "Touch voltage = GPR − surface potential over the touch area; step voltage = largest potential "
        "difference between a point and the points one step away, over the whole map; mesh voltage = worst "
        "touch voltage inside the grid meshes.",
        "Validity: conductor impedance neglected (equipotential electrodes); power-frequency earth fault; soil "
        "as given (its data dominate the answer); Dalziel's limits for 0.03 s ≤ ts ≤ 3 s.",
        "Criteria: IEEE Std 80 (Dalziel's body current for a 50 or 70 kg body, 1000 Ω body resistance, the feet's "
        "resistance 1.5 Cs ρs in parallel for touch and 6 Cs ρs in series for step) and, where asked, EN 50522 "
        "(the permissible touch voltage U_Tp(tf) with the body impedance of IEC/TS 60479-1 and the additional "
        "resistance of footwear and the standing surface, 1.5 m⁻¹ · ρs; no step limit). Each surface zone has its "
        "own limits; a step belongs to the zone of its foot with the lower limit; every criterion must pass in "
        "every zone and every scenario.",
        "How sure: the worst voltages carry a discretisation-error estimate (the solve at twice the segment "
        "length and the search on a map of twice the spacing); a limit inside that band makes the verdict "
        "marginal. Where the soil's parameter uncertainty is known, it is carried to σ and to the probability "
        "that each limit is exceeded (first order in the log-parameters, log-normal results).",
    ):
        story.append(P(text))
    story.append(P("6.1  Validation (computed now, with the same code)", "h2"))
    rows = [["Check", "Source", "Reference", "Computed", "Deviation", "Accepted"]]
    for ch in validation_checks():
        rows.append([Paragraph(ch.name, st["small"]), Paragraph(ch.source, st["small"]),
                     f"{ch.reference:.4g} {ch.unit}", f"{ch.computed:.4g} {ch.unit}", f"{ch.deviation * 100:+.2f} %",
                     Paragraph(ch.accepted, st["small"])])
    story.append(_table(rows, [38 * mm, 32 * mm, 22 * mm, 22 * mm, 18 * mm, 38 * mm], st))

    # ---- reviewer block -------------------------------------------------------------------------
    story.append(KeepTogether([
        P("7  Review", "h1"), _caution_box(st), Spacer(1, 4 * mm),
        _table([["Reviewer name", ""], ["Licence number", ""], ["Date", ""], ["Signature", ""], ["Remarks", ""]],
               [45 * mm, 125 * mm], st, header=False, row_heights=[9 * mm, 9 * mm, 9 * mm, 16 * mm, 30 * mm])]))
    doc.build(story)
    return buf.getvalue()
