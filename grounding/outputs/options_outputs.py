"""Outputs of option comparisons, sweeps and design searches: tables, JSON, CSV, plots and a report."""

from __future__ import annotations

import csv
import io
import json

from ..cautions import CAUTIONS
from ..options.compare import Option
from ..version import __version__
from .results_json import results_dict
from .style import new_figure, volts

OPTIONS_FORMAT = 1


_v = volts


def _verdicts(o: Option) -> str:
    r = o.outcome
    flags = [("T", r.touch_ok), ("S", r.step_ok), ("M", r.mesh_ok), ("C", r.conductor_ok)]
    if r.separate_ok is not None:
        flags.append(("X", r.separate_ok))
    return " ".join(f"{k}:{'ok' if ok else ('—' if ok is None else 'FAIL')}" for k, ok in flags)


def _governing(o: Option) -> str:
    """Names of the governing scenarios of touch and step ('' without scenarios)."""
    return " / ".join(o.outcome.governing_scenarios)


def _pct(margin: float) -> str:
    return "—" if margin == float("inf") else f"{margin * 100:+6.0f}%"


def _limit_margin(limit, margin) -> str:
    return "no limit" if limit is None else f"{limit:,.0f} V / {margin * 100:+.0f}%"


def _cost(o: Option) -> str:
    q = o.quantities
    return "—" if q.cost is None else f"{q.cost:,.0f} {q.currency}".strip()


def compare_table(options: list[Option], best: int | None, reason: str) -> str:
    """A column per option."""
    rows = [
        ("Rg", [f"{o.outcome.grid_resistance:.4f} Ω" for o in options]),
        ("GPR", [_v(o.outcome.ground_potential_rise) for o in options]),
        ("Worst touch", [_v(o.outcome.worst_touch) for o in options]),
        ("  limit / margin", [f"{o.outcome.tolerable_touch:,.0f} V / {o.touch_margin * 100:+.0f}%" for o in options]),
        ("Worst step", [_v(o.outcome.worst_step) for o in options]),
        ("  limit / margin", [_limit_margin(o.outcome.tolerable_step, o.step_margin) for o in options]),
        ("Worst mesh", [_v(o.outcome.worst_mesh) if o.outcome.worst_mesh is not None else "—" for o in options]),
        ("Verdicts", [_verdicts(o) for o in options]),
        *([("Worst scenario", [_governing(o) or "—" for o in options])]
          if any(o.outcome.has_scenarios for o in options) else []),
        ("All pass", ["yes" if o.passes else "NO" for o in options]),
        ("Conductor", [f"{o.quantities.conductor_length_m:,.0f} m" for o in options]),
        ("Rods", [f"{o.quantities.rod_count} / {o.quantities.rod_length_m:,.0f} m" for o in options]),
        ("Metal", [f"{o.quantities.mass_kg:,.0f} kg" for o in options]),
        ("Cost", [_cost(o) for o in options]),
    ]
    width = max(18, max(len(c) for _, cells in rows for c in cells) + 2)
    head = f"{'':<18}" + "".join(f"{f'option {i + 1}' + (' *' if i == best else ''):>{width}}" for i in range(len(options)))
    out = []
    for i, o in enumerate(options, start=1):
        out.append(f"  option {i}: {o.label}")
    out.append("")
    out.append(head)
    for name, cells in rows:
        out.append(f"{name:<18}" + "".join(f"{c:>{width}}" for c in cells))
    out.append("")
    out.append("T touch, S step, M mesh, C conductor size, X touch near separate electrodes; values are those of "
               "the worst scenario where the case lists scenarios (every scenario must pass).")
    out.append(f"Winner: option {best + 1} ({options[best].label}): {reason}." if best is not None
               else f"No winner: {reason}.")
    return "\n".join(out)


def sweep_table(options: list[Option]) -> str:
    """A row per option, passing ones marked."""
    scen = any(o.outcome.has_scenarios for o in options)
    head = f"{'#':>4}  {'pass':<4} {'Rg Ω':>8} {'touch V':>9} {'margin':>7} {'step V':>8} {'margin':>7} " \
           f"{'mesh V':>8} {'metal kg':>9} {'cost':>10}  " + ("worst scenario  " if scen else "") + "settings"
    out = [head, "-" * len(head)]
    for i, o in enumerate(options, start=1):
        mesh = o.outcome.worst_mesh
        out.append(f"{i:>4}  {'✓' if o.passes else '✗':<4} {o.outcome.grid_resistance:8.4f} "
                   f"{o.outcome.worst_touch:9,.0f} {o.touch_margin * 100:+6.0f}% "
                   f"{o.outcome.worst_step:8,.0f} {_pct(o.step_margin):>7} "
                   f"{(f'{mesh:,.0f}' if mesh is not None else '—'):>8} "
                   f"{o.quantities.mass_kg:9,.0f} {_cost(o):>10}  " + (f"{_governing(o)[:15]:<16}" if scen else "")
                   + o.label)
    n = sum(o.passes for o in options)
    out.append(f"{n} of {len(options)} options pass every criterion"
               + (" in every scenario (values: the worst scenario)." if scen else "."))
    return "\n".join(out)


def option_dict(o: Option) -> dict:
    """One option for JSON: the study's summary plus quantities and margins."""
    doc = o.recorded.document if o.result is None else results_dict(o.result)
    q = o.quantities
    return {"label": o.label, "case": o.outcome.source, "title": o.outcome.title,
            "results_file": None if o.recorded is None else o.recorded.path,
            "summary": doc["summary"], "simplified": doc["simplified"], "conductor": doc["conductor"],
            "quantities": {"conductor_length_m": q.conductor_length_m, "rod_count": q.rod_count,
                           "rod_length_m": q.rod_length_m, "mass_kg": round(q.mass_kg, 3),
                           "surface_layer_area_m2": round(q.surface_layer_area_m2, 3), "cost": q.cost,
                           "currency": q.currency},
            "margins": {"touch": o.touch_margin, "step": o.step_margin, "worst": o.worst_margin},
            "passes": o.passes}


def options_json(options: list[Option], best: int | None, reason: str, by: str, extra: dict | None = None) -> bytes:
    """The JSON document of a comparison or sweep (``options`` in order, ``best`` index or null)."""
    doc = {"format": OPTIONS_FORMAT, "tool": {"name": "grounding", "version": __version__},
           "criterion": by, "options": [option_dict(o) for o in options], "best": best, "best_reason": reason}
    doc.update(extra or {})
    doc["cautions"] = list(CAUTIONS)
    return (json.dumps(doc, indent=2, ensure_ascii=False) + "\n").encode("utf-8")


def options_csv(options: list[Option]) -> bytes:
    """One row per option."""
    buf = io.StringIO()
    w = csv.writer(buf)
    buf.write(f"# {CAUTIONS[0]} {CAUTIONS[1]}\n")
    w.writerow(["option", "label", "grid_resistance_ohm", "gpr_v", "max_touch_v", "tolerable_touch_v", "touch_margin",
                "max_step_v", "tolerable_step_v", "step_margin", "max_mesh_v", "passes", "conductor_length_m",
                "rod_count", "rod_length_m", "mass_kg", "cost"])
    for i, o in enumerate(options, start=1):
        r, q = o.outcome, o.quantities
        w.writerow([i, o.label, f"{r.grid_resistance:.6g}", f"{r.ground_potential_rise:.6g}",
                    f"{r.worst_touch:.6g}", f"{r.tolerable_touch:.6g}", f"{o.touch_margin:.4f}",
                    f"{r.worst_step:.6g}", "" if r.tolerable_step is None else f"{r.tolerable_step:.6g}",
                    "" if r.tolerable_step is None else f"{o.step_margin:.4f}",
                    f"{r.worst_mesh:.6g}" if r.worst_mesh is not None else "", int(o.passes),
                    f"{q.conductor_length_m:.2f}", q.rod_count, f"{q.rod_length_m:.2f}", f"{q.mass_kg:.2f}",
                    "" if q.cost is None else f"{q.cost:.2f}"])
    return buf.getvalue().encode("utf-8")


def tradeoff_figure(options: list[Option], best: int | None = None):
    """Material (or cost) against the worst touch-voltage margin, passing options filled."""
    use_cost = all(o.quantities.cost is not None for o in options)
    x = [o.quantities.cost if use_cost else o.quantities.mass_kg for o in options]
    y = [o.touch_margin * 100 for o in options]
    fig, ax = new_figure(figsize=(6.8, 4.4), dpi=160)
    ok = [o.passes for o in options]
    ax.scatter([a for a, k in zip(x, ok) if k], [b for b, k in zip(y, ok) if k], marker="o", color="#1b7837",
               label="passes every criterion", zorder=3)
    ax.scatter([a for a, k in zip(x, ok) if not k], [b for b, k in zip(y, ok) if not k], marker="x",
               color="#b2182b", label="fails", zorder=3)
    if best is not None:
        ax.scatter([x[best]], [y[best]], s=160, facecolors="none", edgecolors="black", label="chosen", zorder=4)
    for i, (a, b) in enumerate(zip(x, y), start=1):
        ax.annotate(str(i), (a, b), xytext=(3, 3), textcoords="offset points", fontsize=6)
    ax.axhline(0, color="black", lw=0.8)
    cur = options[0].quantities.currency if use_cost else ""
    ax.set_xlabel(f"cost ({cur})" if use_cost else "metal mass (kg)")
    ax.set_ylabel("touch-voltage margin to the limit (%)")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7)
    ax.set_title("Layout options: material against touch-voltage margin", fontsize=10)
    fig.tight_layout()
    return fig


def comparison_report(options: list[Option], best: int | None, reason: str, date: str | None = None) -> bytes:
    """A PDF with the comparison table and, per option, its plan and touch map side by side."""
    import datetime as _dt

    from reportlab.lib.pagesizes import A4, landscape
    from reportlab.lib.units import mm
    from reportlab.platypus import BaseDocTemplate, Frame, Image, PageBreak, PageTemplate, Paragraph, Spacer, Table

    from .figures import plan_figure, png_bytes, touch_figure
    from .report.common import ACCENT, WARN, caution_box, styles, table

    st = styles()
    date = date or _dt.datetime.now(_dt.timezone.utc).date().isoformat()
    buf = io.BytesIO()
    size = landscape(A4)

    def decorate(canvas, doc):
        canvas.saveState()
        w, h = size
        canvas.setFillColor(ACCENT)
        canvas.setFont(st["bold"], 8)
        canvas.drawString(15 * mm, h - 10 * mm, "EARTHING GRID LAYOUT OPTIONS · REVIEW COPY")
        canvas.setFont(st["reg"], 8)
        canvas.drawRightString(w - 15 * mm, h - 10 * mm, f"page {doc.page} · grounding {__version__} · {date}")
        canvas.setFillColor(WARN)
        canvas.setFont(st["reg"], 6.6)
        canvas.drawString(15 * mm, 8 * mm, "CAUTION: preliminary study aid only. Results must be reviewed by a licensed "
                          "professional engineer and checked against local codes and the utility's practice. "
                          "Soil and fault data dominate the answer.")
        canvas.restoreState()

    doc = BaseDocTemplate(buf, pagesize=size, leftMargin=15 * mm, rightMargin=15 * mm, topMargin=15 * mm,
                          bottomMargin=14 * mm, title="Earthing grid layout options", author="grounding",
                          invariant=1)
    doc.addPageTemplates([PageTemplate(id="p", frames=[Frame(doc.leftMargin, doc.bottomMargin, doc.width,
                                                              doc.height)], onPage=decorate)])
    P = lambda t, s="body": Paragraph(t, st[s])  # noqa: E731
    story = [P("Layout options", "h1"), caution_box(st), Spacer(1, 4 * mm)]
    head = ["", *[f"{i + 1}{' ★' if i == best else ''}" for i in range(len(options))]]
    rows = [head,
            ["Rg", *[f"{o.outcome.grid_resistance:.3f} Ω" for o in options]],
            ["GPR", *[_v(o.outcome.ground_potential_rise) for o in options]],
            ["Touch / limit", *[f"{_v(o.outcome.worst_touch)} / {o.outcome.tolerable_touch:,.0f}"
                                for o in options]],
            ["Step / limit", *[f"{_v(o.outcome.worst_step)} / " + ("none" if o.outcome.tolerable_step is None else f"{o.outcome.tolerable_step:,.0f}")
                               for o in options]],
            ["All pass", *["PASS" if o.passes else "FAIL" for o in options]],
            ["Metal", *[f"{o.quantities.mass_kg:,.0f} kg" for o in options]],
            ["Cost", *[_cost(o) for o in options]]]
    col = min(40 * mm, (doc.width - 30 * mm) / max(1, len(options)))
    if len(options) <= 8:
        story.append(table(rows, [30 * mm] + [col] * len(options), st))
    story.append(Spacer(1, 3 * mm))
    for i, o in enumerate(options, start=1):
        story.append(P(f"{i}: {o.label} — {o.outcome.source}", "small"))
    story.append(P(f"Winner: option {best + 1}: {reason}." if best is not None else f"No winner: {reason}.", "h2"))
    for i, o in enumerate(options, start=1):
        story.append(PageBreak())
        story.append(P(f"Option {i}: {o.label} — {'PASS' if o.passes else 'FAIL'}", "h2"))
        imgs = []
        for fig in (plan_figure(o.result), touch_figure(o.result)):
            wi, hi = fig.figure.get_size_inches()
            w = 125 * mm
            imgs.append(Image(io.BytesIO(png_bytes(fig.figure)), width=w, height=w * hi / wi))
        story.append(Table([imgs]))
    doc.build(story)
    return buf.getvalue()
