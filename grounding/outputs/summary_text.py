"""The terminal summary of a study: inputs, results, verdicts and cautions, in engineers' units."""

from __future__ import annotations

import textwrap

from .. import __version__
from ..cautions import CAUTIONS
from ..study import StudyResult

WIDTH = 78
#: Margins smaller than this share of the limit are reported as marginal.
MARGINAL = 0.05


def caution_box(cautions=CAUTIONS) -> str:
    """The cautions framed so they cannot be missed."""
    inner = WIDTH - 4
    lines = ["+" + "-" * (WIDTH - 2) + "+", "| " + "CAUTION".ljust(inner) + " |"]
    for c in cautions:
        for i, part in enumerate(textwrap.wrap(c, inner - 2)):
            lines.append("| " + (("* " if i == 0 else "  ") + part).ljust(inner) + " |")
    lines.append("+" + "-" * (WIDTH - 2) + "+")
    return "\n".join(lines)


def _heading(title: str) -> str:
    return f"\n{title}\n{'=' * len(title)}"


def _volts(v: float) -> str:
    return f"{v / 1000:,.2f} kV" if abs(v) >= 10_000 else f"{v:,.0f} V"


def _row(label: str, value: str, note: str = "") -> str:
    return f"  {label:<26}{value:<22}{note}".rstrip()


def _verdict(ok: bool | None) -> str:
    return "n/a" if ok is None else ("PASS" if ok else "FAIL")


def soil_text(case) -> str:
    """One line describing the soil model."""
    layers = case.soil.layers
    if len(layers) == 1:
        return f"uniform, {layers[0].resistivity:.4g} Ω·m"
    parts = [f"{l.resistivity:.4g} Ω·m × {l.thickness:.3g} m" for l in layers[:-1]]
    return f"{len(layers)} layers: " + ", ".join(parts) + f", then {layers[-1].resistivity:.4g} Ω·m"


def study_summary(r: StudyResult) -> str:
    """The readable summary printed by ``grounding study``."""
    c, s, f = r.case, r.surface, r.case.fault
    el = c.electrodes
    out = [f"grounding {__version__} · earthing-grid study", f"Case   {c.source}", f"Title  {c.title}",
           f"SHA-256 of case file  {c.sha256}", "", caution_box()]

    out.append(_heading("Inputs"))
    out.append(_row("Soil", soil_text(c)))
    if c.soil_fit is not None:
        fit = c.soil_fit
        unc = ", ".join(f"ρ{i} ± {l.resistivity_uncertainty * 100:.0f} %"
                        + (f", h{i} ± {l.thickness_uncertainty * 100:.0f} %" if l.thickness is not None else "")
                        for i, l in enumerate(fit.best.layers, start=1))
        out.append(f"  {'  fitted from':<26}{fit.readings.source} (sha256 {fit.readings.sha256[:16]}…)")
        out.append(_row("  fit", f"RMS misfit {fit.best.rms_misfit_percent:.1f} %",
                        f"{fit.readings.array}, {len(fit.readings)} readings; {unc}"))
        down = int(fit.best.down_weighted.sum())
        if down:
            out.append(_row("", f"{down} reading(s) down-weighted"))
    if c.surface_layer:
        out.append(_row("Surface layer", f"{c.surface_layer.resistivity:g} Ω·m",
                        f"{c.surface_layer.thickness * 1000:.0f} mm thick"))
    else:
        out.append(_row("Surface layer", "none", "people stand on the top soil"))
    xr = "none (Df = 1)" if f.x_over_r is None else f"{f.x_over_r:g}"
    out.append(_row("Fault current 3I0", f"{f.current / 1000:.2f} kA",
                    f"Sf = {f.split_factor:g}, X/R = {xr}, {f.frequency:g} Hz"))
    out.append(_row("Durations", f"tf = {f.clearing_time:g} s", f"ts = {f.shock_duration:g} s (body current)"))
    out.append(_row("Body weight", f"{c.criteria.body_weight} kg", "IEEE Std 80, Dalziel"))
    rods = r.segments.is_rod
    out.append(_row("Electrodes", f"{r.segments.total_length:,.1f} m",
                    f"{len(el.grids)} grid(s), {len(el.conductors)} conductor(s), {len(el.rods)} rod(s); "
                    f"{el.material}"))
    out.append(_row("Discretisation", f"{len(r.segments)} segments",
                    f"max {c.discretization.max_segment:g} m ({int(rods.sum())} on rods)"))

    out.append(_heading("Grid"))
    err = r.discretization_error
    note = f"± {err.relative * 100:.2f} % discretisation (est.)" if err.relative is not None else err.note
    out.append(_row("Grid resistance Rg", f"{r.grid_resistance:.4f} Ω", note))
    out.append(_row("Decrement factor Df", f"{r.decrement_factor:.3f}"))
    out.append(_row("Grid current IG", f"{r.grid_current / 1000:.3f} kA", "= Df · Sf · 3I0"))
    out.append(_row("Ground potential rise", _volts(r.ground_potential_rise), "GPR = IG · Rg"))

    out.append(_heading(f"Safety (IEEE Std 80, {r.body_weight} kg, ts = {f.shock_duration:g} s)"))
    out.append(_row("Surface-layer factor Cs", f"{r.limits.cs:.3f}",
                    f"ρs = {r.limits.surface_resistivity:g} Ω·m"))
    out.append(f"  {'':<18}{'worst':>10}{'tolerable':>12}{'margin':>9}  {'verdict':<8}at (x, y) m")

    def line(name, ext, limit, ok):
        if ext is None:
            return f"  {name:<18}{'—':>10}{_volts(limit):>12}{'':>9}  {'n/a':<8}no closed mesh"
        margin = (limit - ext.value) / limit * 100
        return (f"  {name:<18}{_volts(ext.value):>10}{_volts(limit):>12}{margin:>8.0f}%  {_verdict(ok):<8}"
                f"({ext.x:.1f}, {ext.y:.1f})")

    out.append(line("Touch voltage", s.max_touch, r.tolerable_touch, r.touch_ok))
    out.append(line("Step voltage", s.max_step, r.tolerable_step, r.step_ok))
    out.append(line("Mesh voltage", s.max_mesh, r.tolerable_touch, r.mesh_ok))
    other = 50 if r.body_weight == 70 else 70
    out.append(f"  Limits for {other} kg: touch {_volts(r.limits.touch[other])}, step {_volts(r.limits.step[other])}")
    if not (r.touch_ok and r.step_ok):
        out.append("  !! At least one criterion FAILS: the layout is not safe as modelled.")
    thin = [name for name, ext, limit in (("touch", s.max_touch, r.tolerable_touch), ("step", s.max_step, r.tolerable_step))
            if abs(limit - ext.value) / limit < MARGINAL]
    if thin:
        out.append(f"  !! The {' and '.join(thin)} margin is within {MARGINAL * 100:.0f} % of the limit: treat the "
                   "verdict as marginal (soil data, fault data and discretisation are all less certain than that).")

    out.append(_heading("Simplified method (IEEE Std 80) beside the numerical result"))
    simp = r.simplified
    if simp.applicable:
        fa = simp.factors
        out.append(_row("Rg (Sverak)", f"{simp.grid_resistance:.4f} Ω", f"numerical {r.grid_resistance:.4f} Ω"))
        mesh_num = f"numerical {_volts(s.max_mesh.value)}" if s.max_mesh else ""
        out.append(_row("Mesh voltage Em", _volts(simp.mesh_voltage), mesh_num))
        out.append(_row("Step voltage Es", _volts(simp.step_voltage), f"numerical {_volts(s.max_step.value)}"))
        out.append(f"  n = {fa['n']:.2f}, Km = {fa['Km']:.4f}, Ki = {fa['Ki']:.3f}, Ks = {fa['Ks']:.4f}, "
                   f"Kii = {fa['Kii']:.3f}, Kh = {fa['Kh']:.3f}, LM = {fa['LM']:.1f} m, LS = {fa['LS']:.1f} m")
    else:
        out.append(f"  not applicable: {simp.reason}")

    out.append(_heading("Conductor sizing (IEEE Std 80 eq. for fusing / max temperature)"))
    cc = r.conductor
    out.append(_row("Sizing current", f"{cc.current_a / 1000:.2f} kA", f"Df · 3I0 for tf = {f.clearing_time:g} s"))
    out.append(_row("Required area", f"{cc.required_area_mm2:.1f} mm²",
                    f"Tm = {cc.max_temperature:g} °C, Ta = {cc.ambient_temperature:g} °C"))
    out.append(_row("Smallest conductor", f"{cc.actual_area_mm2:.1f} mm²", _verdict(cc.ok)))

    if c.probes:
        out.append(_heading("Probes"))
        out.append(f"  {'x m':>8}{'y m':>8}{'surface potential':>20}{'touch voltage':>16}")
        for (x, y), v, t in zip(c.probes, s.probe_potential, r.probe_touch_voltages()):
            out.append(f"  {x:>8.1f}{y:>8.1f}{_volts(v):>20}{_volts(t):>16}")
    if r.warnings:
        out.append(_heading("Notes on the model"))
        for w in r.warnings:
            out.extend(textwrap.wrap(w, WIDTH - 4, initial_indent="  - ", subsequent_indent="    "))
    t = r.timings
    out.append(f"\nTimings: assemble {t['assemble_s']:.2f} s, solve {t['solve_s']:.2f} s, "
               f"surface {t['surface_s']:.2f} s; solve residual {r.solution.relative_residual:.1e}")
    out.append("")
    out.append(caution_box())
    return "\n".join(out)
