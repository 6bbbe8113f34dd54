"""The terminal summary of a study: inputs, results, verdicts and cautions, in engineers' units."""

from __future__ import annotations

import cmath
import math
import textwrap

from ..cautions import CAUTIONS
from ..safety.site import STANDARD_NAMES
from ..study.result import StudyResult
from ..study.uncertainty import uncertain_passes
from ..version import __version__
from .style import volts

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


def solver_text(r: StudyResult) -> str:
    """How the electrode system was solved, in words: kind, iterations, residual."""
    info = r.solution.solver or {"kind": "dense"}
    if info.get("network"):
        how = "dense" if info.get("kind") == "dense" else \
            f"GMRES on compressed operators, {info.get('iterations')} iterations"
        return (f"{len(r.segments):,} segments, coupled metal–soil solve ({how}; power balance "
                f"{info.get('power_balance', 0.0):.0e}), relative residual {r.solution.relative_residual:.1e}")
    if info.get("kind") == "iterative":
        return (f"{len(r.segments):,} segments, compressed operator ({info.get('operator_mb', 0):,.0f} MB) and "
                f"conjugate gradients, {info.get('iterations')} iterations, relative residual "
                f"{r.solution.relative_residual:.1e}")
    return f"{len(r.segments):,} segments, dense Cholesky solve, relative residual {r.solution.relative_residual:.1e}"


def _heading(title: str) -> str:
    return f"\n{title}\n{'=' * len(title)}"


_volts = volts


def _row(label: str, value: str, note: str = "") -> str:
    """One line of label, value and note in columns; a label or value too long for its column keeps two spaces
    before the next, so that words never run together."""
    label = label if len(label) < 25 else label + "  "
    value = value if len(value) < 21 else value + "  "
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


#: A no-break space: keeps a value and its unit on one line when a line is wrapped.
NBSP = "\u00a0"


def _alert(text: str) -> list[str]:
    """A '!!' warning wrapped to the summary width."""
    return textwrap.wrap(text, WIDTH - 5, initial_indent="  !! ", subsequent_indent="     ")


def covering_text(zone) -> str:
    """The covering of a zone in words."""
    if zone.layer is None:
        return "native soil"
    return f"{zone.layer.resistivity:g} Ω·m × {zone.layer.thickness * 1000:.0f} mm"


def _at(ext) -> str:
    return f"({ext.x:.1f}, {ext.y:.1f})"


def safety_lines(r: StudyResult) -> list[str]:
    """Zones and their limits, the governing result per criterion, per-zone verdicts and separate electrodes."""
    out = []
    several = len(r.zones) > 1
    if several:
        out.append("  Zones (where people stand); each criterion is judged in every zone against that zone's limit:")
        names = [z.label() for z in r.zones]
        w = min(34, max(22, max(len(n) for n in names) + 1))
        out.append(f"    {'zone':<{w}}{'covering':<22}{'Cs':>6}{'touch limit':>13}{'step limit':>12}")
        for z, name in zip(r.zones, names):
            cs = "—" if z.limits.standard == "en50522" else f"{z.limits.cs:.3f}"
            out.append(f"    {name[:w - 1]:<{w}}{covering_text(z.zone)[:21]:<22}{cs:>6}"
                       f"{_volts(z.tolerable_touch):>13}{_volts(z.tolerable_step):>12}")
    else:
        z = r.zones[0]
        if z.limits.standard == "en50522":
            out.append(_row("Standing surface", f"ρs = {z.limits.surface_resistivity:g} Ω·m", "R_a2 = 1.5 m⁻¹ · ρs"))
        else:
            out.append(_row("Surface-layer factor Cs", f"{z.limits.cs:.3f}",
                            f"ρs = {z.limits.surface_resistivity:g} Ω·m"))
    if r.case.surface_layer is not None and not r.case.surface_zones:
        out.append("  !! The surface layer is assumed to cover the WHOLE map, also outside the fence. Where people")
        out.append("     stand on native soil the limits are much lower: describe the site with surface_zones.")
    out.append(f"  {'':<15}{'worst':>10}{'± error':>9}{'tolerable':>11}{'margin':>8}  {'verdict':<9}at (x, y) m"
               + ("  zone" if several else ""))

    def line(name, check):
        if check.worst is None:
            why = "no closed mesh" if check.ok is None else "NOT EVALUATED (no map point)"
            return f"  {name:<15}{'—':>10}{'':>9}{_volts(check.limit):>11}{'':>8}  {_verdict(check.ok):<9}{why}"
        margin = "" if check.margin is None else f"{check.margin * 100:.0f}%"
        where = [check.zone] if several else []
        if check.scenario:
            where.append(f"scenario '{check.scenario}'")
        err = "" if check.error is None else _volts(check.error)
        verdict = _verdict(check.ok) + ("?" if check.limit_within_error else "")
        if check.limit is None:
            where.append(f"no {name.split()[0].lower()} limit in {STANDARD_NAMES.get(check.standard, check.standard)}")
        return (f"  {name:<15}{_volts(check.worst.value):>10}{err:>9}{_volts(check.limit):>11}{margin:>8}  "
                f"{verdict:<9}{_at(check.worst)}" + (f"  {', '.join(where)}" if where else ""))

    out.append(line("Touch voltage", r.touch_check))
    out.append(line("Step voltage", r.step_check))
    out.append(line("Mesh voltage", r.mesh_check))
    if r.touch_check.worst is not None:
        from ..geometry.plan import describe_place
        w = r.touch_check.worst
        out.append(f"  The worst touch voltage is {describe_place(r.segments, r.surface.meshes, w.x, w.y)}.")
    if several:
        out.append("  Per zone (worst in the zone / the zone's limit)"
                   + (f", case as written ('{r.scenario}'):" if r.scenarios else ":"))
        for z in r.zones:
            parts = []
            for crit, limit in (("touch", z.tolerable_touch), ("step", z.tolerable_step), ("mesh", z.tolerable_touch)):
                ext = getattr(z.extremes, crit)
                parts.append(f"{crit} —" if ext is None else
                             f"{crit} {_volts(ext.value)}/{_volts(limit)} {_verdict(z.ok(crit))}")
            out.append(f"    {z.name[:21]:<22}" + ", ".join(parts))
    else:
        if r.limits.standard == "ieee80":
            other = 50 if r.body_weight == 70 else 70
            out.append(f"  Limits for {other} kg: touch {_volts(r.limits.touch[other])}, "
                       f"step {_volts(r.limits.step[other])}")
        if r.limits.basis is not None:
            b = r.limits.basis
            out.append(f"  EN 50522: U_Tp {_volts(b.permissible_touch_voltage_v)} for tf = {b.fault_duration_s:g} s; "
                       f"Z_B {b.body_impedance_ohm:,.0f} Ω, I_B {b.body_current_a * 1000:.0f} mA;")
            out.append(f"    R_a = footwear {b.footwear_resistance_ohm:,.0f} Ω + 1.5·ρs {b.surface_resistance_ohm:,.0f} Ω "
                       f"→ U_vTp {_volts(b.prospective_touch_voltage_v)}")
    if r.separate:
        out.append("  Separate electrodes (touch = |metal potential − surface potential| within "
                   f"{r.case.surface.touch_reach:g} m)" + (f", case as written ('{r.scenario}'):" if r.scenarios else ":"))
        for e in r.separate:
            t = e.touch
            net = "net current 0 (floating)" if e.connection == "floating" else f"net {e.net_current / 1000:+.3f} kA"
            head = (f"    {e.name[:20]:<21}{e.connection:<9}{_volts(e.potential):>9} ({e.potential_fraction * 100:.0f} % GPR), "
                    f"{net}")
            out.append(head)
            if t.worst is None:
                out.append("      touch: nowhere within reach on the map")
            else:
                out.append(f"      touch {_volts(t.worst.value)} / {_volts(t.limit)} {_verdict(t.ok)} at {_at(t.worst)}"
                           + (f" in {t.zone}" if several else ""))
            if e.transferred_voltage is not None:
                out.append(f"      transferred: up to {_volts(e.transferred_voltage)} between the metal (remote earth) "
                           f"and the ground within reach, at {_at(e.transferred)}")
    if len(r.criteria) > 1:
        out.extend(other_criteria_lines(r))
    if r.scenarios:
        out.extend(scenario_lines(r))
    if not r.passes:
        failing = r.failures()
        text = "At least one criterion FAILS: the layout is not safe as modelled" + (
            ". Failing: " + "; ".join(failing) + "." if failing else ".")
        out.extend(textwrap.wrap(text, WIDTH - 2, initial_indent="  !! ", subsequent_indent="     "))
    thin = [name for name, check in (("touch", r.touch_check), ("step", r.step_check), ("mesh", r.mesh_check))
            if check.margin is not None and abs(check.margin) < MARGINAL]
    if thin:
        out.extend(_alert(f"The {' and '.join(thin)} margin is within {MARGINAL * 100:.0f} % of the limit: treat "
                          "the verdict as marginal (soil data, fault data and discretisation are all less certain "
                          "than that)."))
    for scenario, name, p in uncertain_passes(r):
        out.extend(_alert(uncertain_pass_text(scenario, name, probability_text(p))))
    inside = [(name, check) for name, check in (("touch", r.touch_check), ("step", r.step_check),
                                                ("mesh", r.mesh_check)) if check.limit_within_error]
    for name, check in inside:
        out.extend(_alert(f"MARGINAL ({name}): the limit {_volts(check.limit)} lies inside the discretisation error "
                          f"band {_volts(check.worst.value)} ± {_volts(check.error)} (segments and map spacing): the "
                          "verdict could flip; refine with --converge."))
    if r.contours:
        out.append("  Potential contours: " + "; ".join(
            f"{_volts(level)}: {len(lines)} line(s)" for level, lines in r.contours))
    return out


def standard_heading(r: StudyResult) -> str:
    """How the summary's verdicts are judged, in words."""
    f = r.case.fault
    if r.case.criteria.standards[0] == "en50522":
        return f"Safety (EN 50522, tf = {f.shock_duration:g} s, footwear {r.case.criteria.footwear_resistance:g} Ω)"
    return f"Safety (IEEE Std 80, {r.body_weights}, ts = {f.shock_duration:g} s)"


def other_criteria_lines(r: StudyResult) -> list[str]:
    """The verdicts of every further standard asked for, beside the first."""
    out = []
    for c in r.criteria[1:]:
        out.append(f"  Also judged by {STANDARD_NAMES[c.standard]} (its own verdicts):")
        for name, check in (("touch", c.touch), ("step", c.step), ("mesh", c.mesh)):
            if check.worst is None:
                continue
            where = f" in {check.zone}" if len(c.zones) > 1 else ""
            out.append(f"    {name:<6}{_volts(check.worst.value):>10} / {_volts(check.limit):>9}  {_verdict(check.ok)}"
                       + (where if check.limit is not None else f"  (no {name} limit in this standard)"))
        for e in c.separate:
            if e.touch.worst is not None:
                out.append(f"    touch near {e.name}: {_volts(e.touch.worst.value)} / {_volts(e.touch.limit)}  "
                           f"{_verdict(e.touch.ok)}")
        out.append(f"    all {STANDARD_NAMES[c.standard]} criteria: {'PASS' if c.passes else 'FAIL'}")
    return out


def _short(check) -> str:
    if check.worst is None:
        return "—" if check.ok is None else "not evaluated"
    return f"{_volts(check.worst.value)}/{_volts(check.limit)} {_verdict(check.ok)}"


def scenario_lines(r: StudyResult) -> list[str]:
    """One line per scenario: Rg, GPR and each criterion against its limit; the worst govern the verdicts."""
    w = min(34, max(18, max(len(s.scenario) for s in r.scenarios) + 1))     # names up to 33 characters in full
    out = ["  Scenarios (conditions the layout must all pass; the verdicts above are the worst of them):",
           f"    {'scenario':<{w}}{'Rg':>9}{'GPR':>10}  {'touch':<22}{'step':<22}{'mesh':<22}all"]
    for s in r.scenarios:
        out.append(f"    {s.scenario[:w - 1]:<{w}}{s.grid_resistance:>7.3f} Ω{_volts(s.ground_potential_rise):>10}  "
                   f"{_short(s.touch_check):<22}{_short(s.step_check):<22}{_short(s.mesh_check):<22}"
                   f"{'PASS' if s.passes else 'FAIL'}")
    for s in r.scenarios:
        o = s.diagnostics.solve
        text = f"{s.scenario}: {o.describe() if o is not None else 'solved'}, {s.timings.get('scenario_s', 0.0):.2f} s"
        out.extend(textwrap.wrap(text, WIDTH - 4, initial_indent="    ", subsequent_indent="      "))
    return out


#: Results the soil uncertainty is carried to, as printed.
UNCERTAINTY_LABELS = {"grid_resistance": "Grid resistance Rg", "ground_potential_rise": "GPR", "touch": "Worst touch",
                      "step": "Worst step", "mesh": "Worst mesh"}


def uncertainty_lines(r: StudyResult) -> list[str]:
    """σ of Rg, GPR and the worst voltages, and the probability that each limit is exceeded."""
    u = r.uncertainty
    out = [f"  From {u.source}: " + ", ".join(f"{n} ± {math.expm1(s) * 100:.0f} %"
                                              for n, s in zip(u.parameters, u.sigma_log))]
    if u.scope:
        out.extend(textwrap.wrap(f"Scope: {u.scope}.", WIDTH - 4, initial_indent="  ", subsequent_indent="  "))
    out.append(f"  {'':<22}{'value':>10}{'1-σ':>10}{'P(limit exceeded)':>20}")
    for key, label in UNCERTAINTY_LABELS.items():
        q = u.quantities[key]
        if q.value is None or q.sigma is None:
            continue
        fmt = (lambda v: f"{v:.3f} Ω") if key == "grid_resistance" else _volts
        prob = "" if q.probability_exceeds_limit is None else probability_text(q.probability_exceeds_limit)
        out.append(f"  {label:<22}{fmt(q.value):>10}{fmt(q.sigma):>10}{prob:>20}")
    for line in shared_probability_lines(u):
        out.extend(textwrap.wrap(f"P(limit exceeded), {line}", WIDTH - 4, initial_indent="  ",
                                 subsequent_indent="    "))
    out.extend(textwrap.wrap(f"Model: {u.model}; {u.level}. Cost: {u.extra_solves} extra solves ({u.seconds:.1f} s). "
                             "Soil data only: fault data, discretisation and the choice of soil model add to this.",
                             WIDTH - 4, initial_indent="  ", subsequent_indent="  "))
    return out


def uncertain_pass_text(scenario: str, criterion: str, probability: str) -> str:
    """The warning for a check that passes as computed but that the soil uncertainty may fail (``probability`` in
    words, e.g. "12.3 %"); ``scenario`` "" for the case without scenarios."""
    where = f", scenario '{scenario}'" if scenario else ""
    return (f"MARGINAL ({criterion}{where}): it passes as computed, but with the soil uncertainty given the "
            f"probability that the limit is exceeded is {probability}.")


def shared_probability_lines(u) -> list[str]:
    """P(limit exceeded) of the scenarios with the as-written case's solve, a line each, in words."""
    return [f"'{name}' (same solve): " + ", ".join(
        f"{k} {'not computed (worst point elsewhere)' if p is None else probability_text(p).replace(' %', NBSP + '%')}"
        for k, p in probs.items())
        for name, probs in u.scenario_probabilities]


def probability_text(p: float) -> str:
    """A probability as engineers read it (%): below 0.01 % and above 99.99 % as bounds, never as 0 or 100 %
    (a first-order log-normal estimate does not make an outcome certain)."""
    if p < 1e-4:
        return "< 0.01 %"
    if p > 1 - 1e-4:
        return "> 99.99 %"
    return f"{p * 100:.1f} %"


def study_summary(r: StudyResult, units: str = "si") -> str:
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
    if c.surface_zones:
        out.append(_row("Surface zones", f"{len(c.surface_zones)} zone(s)", "native soil outside them"))
    elif c.surface_layer:
        out.append(_row("Surface layer", f"{c.surface_layer.resistivity:g} Ω·m",
                        f"{c.surface_layer.thickness * 1000:.0f} mm thick, assumed over the WHOLE map"))
    else:
        out.append(_row("Surface layer", "none", "people stand on the top soil"))
    if c.separate_electrodes:
        out.append(_row("Separate electrodes", f"{len(c.separate_electrodes)}",
                        ", ".join(f"{e.name} ({e.connection})" for e in c.separate_electrodes)))
    xr = "none (Df = 1)" if f.x_over_r is None else f"{f.x_over_r:g}"
    out.append(_row("Fault current 3I0", f"{f.current / 1000:.2f} kA",
                    f"Sf = {f.split_factor:.3g}, X/R = {xr}, " + ("DC" if f.is_dc else f"{f.frequency:g} Hz")))
    if f.split_basis:
        out.extend(textwrap.wrap(f.split_basis, WIDTH - 4, initial_indent="    ", subsequent_indent="    "))
    out.append(_row("Durations", f"tf = {f.clearing_time:g} s", f"ts = {f.shock_duration:g} s (body current)"))
    out.append(_row("Criteria", " + ".join(STANDARD_NAMES[x] for x in c.criteria.standards),
                    f"{c.criteria.body_weight} kg (IEEE Std 80)" if "ieee80" in c.criteria.standards else
                    f"footwear {c.criteria.footwear_resistance:g} Ω"))
    rods = r.segments.is_rod
    out.append(_row("Electrodes", f"{r.segments.total_length:,.1f} m",
                    f"{len(el.grids)} grid(s), {len(el.conductors)} conductor(s), {len(el.rods)} rod(s); "
                    f"{el.material}"))
    out.append(_row("Discretisation", f"{len(r.segments)} segments",
                    f"max {c.discretization.max_segment:g} m ({int(rods.sum())} on rods)"))

    out.append(_heading("Grid"))
    err = r.discretization_error
    note = f"± {err.relative * 100:.2f} % discretisation (est.)" if err.relative is not None else err.note
    metal = r.solution.metal
    if metal is None:
        out.append(_row("Grid resistance Rg", f"{r.grid_resistance:.4f} Ω", note))
    else:
        z = metal.solution.impedance
        out.append(_row("Grid impedance |Zg|", f"{abs(z):.4f} Ω",
                        f"angle {math.degrees(cmath.phase(z)):.1f}°, at the injection point; {note}"))
    out.append(_row("Decrement factor Df", f"{r.decrement_factor:.3f}"))
    out.append(_row("Grid current IG", f"{r.grid_current / 1000:.3f} kA", "= Df · Sf · 3I0"))
    if metal is None:
        out.append(_row("Ground potential rise", _volts(r.ground_potential_rise), "GPR = IG · Rg"))
    else:
        lo, _ = metal.fraction(0)
        out.append(_row("GPR at injection point", _volts(r.ground_potential_rise), "= IG · |Zg|"))
        out.append(_row("Metal potential", f"{100 * lo:.1f} … 100 %",
                        "of the injection point's, over the energised metal (conductor impedance modelled)"))
    drop = r.metal_drop
    if drop is not None and drop.estimated:
        if drop.fraction is None:
            out.append(_row("Metal potential drop", "not estimated", drop.note))
        else:
            flag = "MAY MATTER: > 2 % of GPR" if drop.fraction > 0.02 else "under 2 % of GPR"
            out.append(_row("Metal potential drop", f"{100 * drop.fraction:.1f} % (est.)",
                            f"{flag}; equipotential model"))
    if r.current_division is not None:
        for p in r.current_division.paths:
            far = abs(p.far_potential) * r.case.fault.current * r.decrement_factor
            where = "far-end earthing" if p.kind == "cable" else "first tower"
            out.append(_row(f"  path {p.name}"[:26], f"{abs(p.current) * r.case.fault.current / 1000:.3f} kA",
                            f"{p.kind}, |Z| {abs(p.impedance):.3g} Ω; {where} at about {_volts(far)}"))

    if r.convergence is not None:
        cv = r.convergence
        out.append(_row("Convergence", "settled" if cv.converged else "NOT SETTLED",
                        f"tolerance {cv.tolerance * 100:g} % on the worst voltages"))
        for k, rd in enumerate(cv.rounds, start=1):
            vals = ", ".join(f"{n} {_volts(v)}" for n, v in (("touch", rd.touch), ("step", rd.step), ("mesh", rd.mesh))
                             if v is not None)
            out.append(f"    round {k}: max_segment {rd.max_segment:g} m, map {rd.resolution:g} m, "
                       f"{rd.segments} segments: {vals}")
        out.extend(textwrap.wrap(cv.note, WIDTH - 4, initial_indent="    ", subsequent_indent="    "))

    out.append(_heading(standard_heading(r)))
    out.extend(safety_lines(r))

    if r.uncertainty is not None:
        out.append(_heading("Soil uncertainty carried to the verdict"))
        out.extend(uncertainty_lines(r))

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
    sized = next((x for x in r.scenarios if x.scenario == cc.scenario), r) if cc.scenario else r
    tf = sized.case.fault.clearing_time
    out.append(_row("Sizing current", f"{cc.current_a / 1000:.2f} kA", f"Df · 3I0 for tf = {tf:g} s"
                    + (f", scenario '{cc.scenario}' (the one that needs the most area)" if cc.scenario else "")))
    kcmil = (lambda a: f" ({a / 0.506707:.0f} kcmil)") if units == "us" else (lambda a: "")
    out.append(_row("Required area", f"{cc.required_area_mm2:.1f} mm²{kcmil(cc.required_area_mm2)}",
                    f"Tm = {cc.max_temperature:g} °C, Ta = {cc.ambient_temperature:g} °C"))
    out.append(_row("Governing conductor", f"{cc.actual_area_mm2:.1f} mm²{kcmil(cc.actual_area_mm2)}",
                    f"{_verdict(cc.ok)}: {cc.element} ({cc.material}), least area for what its material needs"))
    if r.scenarios:
        per = ", ".join(f"{x.scenario} {x.conductor.required_area_mm2:.1f} mm² {_verdict(x.conductor.ok)}"
                        for x in r.scenarios)
        out.extend(textwrap.wrap(f"area needed per scenario: {per}", WIDTH - 4, initial_indent="    ",
                                 subsequent_indent="      "))

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
    origin = r.diagnostics.solve
    reused = origin is not None and origin.origin != "solved"
    out.append(f"\nTimings{' (of the solve reused)' if reused else ''}: assemble {t['assemble_s']:.2f} s, "
               f"solve {t['solve_s']:.2f} s, surface {t['surface_s']:.2f} s; {solver_text(r)}")
    if origin is not None:
        out.append(f"Solve: {origin.describe()}")
    out.append("")
    out.append(caution_box())
    return "\n".join(out)
