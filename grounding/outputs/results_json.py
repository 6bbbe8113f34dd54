"""The study results as a JSON document (format 1; keys documented in docs/results-json.md)."""

from __future__ import annotations

import cmath
import contextvars
import json
import math

from ..study.result import StudyResult
from ..study.uncertainty import uncertain_passes
from ..surface.results import SAFETY_FACTOR
from ..version import __version__

RESULTS_FORMAT = 1

#: When True, numbers keep every digit (the stored golden results of the tests); the files keep 6.
_FULL_PRECISION = contextvars.ContextVar("full_precision", default=False)


def _num(x, digits: int = 6):
    """A float rounded to ``digits`` significant digits (every digit under ``results_dict(full_precision=True)``),
    or None for None/NaN."""
    if x is None:
        return None
    x = float(x)
    if not math.isfinite(x):
        return None
    if _FULL_PRECISION.get():
        return x
    return float(f"{x:.{digits}g}")


def _soil(c) -> dict:
    out = {"layers": [{"resistivity": l.resistivity, **({"thickness": l.thickness} if l.thickness else {})}
                      for l in c.soil.layers], "fit": None}
    if c.soil_fit is not None:
        from .soil_outputs import fit_dict
        out["fit"] = {"readings_file": c.soil_fit.readings.source, "sha256": c.soil_fit.readings.sha256,
                      **fit_dict(c.soil_fit)}
    return out


def _at(ext):
    return None if ext is None else [_num(ext.x), _num(ext.y)]


def _value(ext):
    return None if ext is None else _num(ext.value)


def _zones(r: StudyResult) -> list[dict]:
    out = []
    for z in r.zones:
        e = z.extremes
        layer = z.zone.layer
        out.append({"name": z.name,
                    "surface_layer": None if layer is None else {"resistivity_ohm_m": layer.resistivity,
                                                                 "thickness_m": layer.thickness},
                    "surface_layer_factor_cs": _num(z.limits.cs), "body_weight_kg": z.body_weight,
                    "tolerable_touch_voltage_v": _num(z.tolerable_touch),
                    "tolerable_step_voltage_v": _num(z.tolerable_step),
                    "max_touch_voltage_v": _value(e.touch), "max_touch_at": _at(e.touch),
                    "max_step_voltage_v": _value(e.step), "max_step_at": _at(e.step),
                    "max_mesh_voltage_v": _value(e.mesh), "max_mesh_at": _at(e.mesh),
                    "touch_ok": z.ok("touch"), "step_ok": z.ok("step"), "mesh_ok": z.ok("mesh")})
    return out


def _criteria(r: StudyResult) -> list[dict]:
    """One entry per standard asked for; the first one's verdicts are the summary's."""
    from ..safety.en50522 import BODY_IMPEDANCE_BASIS, BODY_IMPEDANCE_TABLE, UTP_TABLE

    out = []
    for c in r.criteria:
        basis = None
        if c.standard == "en50522":
            b = c.zones[[z.name for z in c.zones].index(c.touch.zone)].limits.basis
            basis = {"fault_duration_s": b.fault_duration_s,
                     "permissible_touch_voltage_v": _num(b.permissible_touch_voltage_v),
                     "additional_resistance_ohm": _num(b.additional_resistance_ohm),
                     "footwear_resistance_ohm": _num(b.footwear_resistance_ohm),
                     "surface_resistance_ohm": _num(b.surface_resistance_ohm),
                     "body_impedance_ohm": _num(b.body_impedance_ohm), "body_current_a": _num(b.body_current_a),
                     "curve": [{"fault_duration_s": t, "permissible_touch_voltage_v": u} for t, u in UTP_TABLE],
                     "body_impedance_table": [{"touch_voltage_v": v, "body_impedance_ohm": z}
                                              for v, z in BODY_IMPEDANCE_TABLE],
                     "sources": f"U_Tp: EN 50522 Annex B, recalled from memory; Z_B: {BODY_IMPEDANCE_BASIS}; "
                                "check both against the standards"}
        elif c.zones:
            lim = c.zones[[z.name for z in c.zones].index(c.touch.zone)].limits
            basis = {"surface_layer_factor_cs": _num(lim.cs), "surface_resistivity_ohm_m": _num(lim.surface_resistivity),
                     "body_weight_kg": r.body_weight, "shock_duration_s": r.case.fault.shock_duration}
        out.append({"standard": c.standard, "tolerable_touch_voltage_v": _num(c.touch.limit),
                    "tolerable_step_voltage_v": _num(c.step.limit), "max_touch_voltage_v": _value(c.touch.worst),
                    "max_step_voltage_v": _value(c.step.worst), "touch_ok": c.touch.ok, "step_ok": c.step.ok,
                    "mesh_ok": c.mesh.ok, "all_pass": bool(c.passes), "governing_zone": c.touch.zone,
                    "basis": basis})
    return out


def _separate(r: StudyResult) -> list[dict]:
    return [{"name": e.name, "connection": e.connection, "potential_v": _num(e.potential),
             "potential_fraction_of_gpr": _num(e.potential_fraction), "net_current_a": _num(e.net_current),
             "max_touch_voltage_v": _value(e.touch.worst), "max_touch_at": _at(e.touch.worst),
             "tolerable_touch_voltage_v": _num(e.touch.limit), "touch_zone": e.touch.zone,
             "touch_ok": bool(e.touch.ok),
             "transferred_voltage_v": _num(e.transferred_voltage), "transferred_at": _at(e.transferred)} for e in r.separate]


def _voltage_error(r: StudyResult) -> dict:
    """Discretisation-error estimates of the governing worst voltages (V) and what they came from."""
    out = {}
    for name, check in (("touch", r.touch_check), ("step", r.step_check), ("mesh", r.mesh_check)):
        w = check.worst
        out[f"{name}_v"] = _num(check.error)
        out[f"{name}_segment_check_v"] = None if w is None else _num(w.segment_check)
        out[f"{name}_map_check_v"] = None if w is None else _num(w.map_check)
        out[f"{name}_limit_within_error"] = bool(check.limit_within_error)
    err = r.discretization_error
    how = ("" if err.order is None else
           f", r = {err.refinement_ratio:.3g} (the segments' refinement ratio), p = {err.order:.2g} (1 for grids, "
           "0.4 for rods, by the rods' share of the current)")
    out["method"] = (f"Fs·|V − V(2h)|/(r^p − 1){how}, from the solve at twice the segment length at the same "
                     "point, plus Fs·|V − V(2Δ)| from the searches on a map of twice the spacing; "
                     f"Fs = {SAFETY_FACTOR:g}, the factor of safety of Roache's grid convergence index")
    return out


def _uncertainty(r: StudyResult) -> dict | None:
    u = r.uncertainty
    if u is None:
        return None
    keys = {"grid_resistance": "grid_resistance_ohm", "ground_potential_rise": "ground_potential_rise_v",
            "touch": "max_touch_voltage_v", "step": "max_step_voltage_v", "mesh": "max_mesh_voltage_v"}
    out = {"source": u.source, "scope": u.scope or None, "model": u.model, "level": u.level,
           "extra_solves": u.extra_solves, "seconds": _num(u.seconds, 3),
           "parameters": [{"name": n, "sigma_log": _num(s)} for n, s in zip(u.parameters, u.sigma_log)]}
    for k, name in keys.items():
        q = u.quantities[k]
        entry = {"value": _num(q.value), "sigma": _num(q.sigma), "sigma_log": _num(q.sigma_log),
                 "sensitivities": [_num(x) for x in q.sensitivities]}
        if k in ("touch", "step", "mesh"):
            entry["probability_exceeds_limit"] = _num(q.probability_exceeds_limit)
        out[name] = entry
    out["scenarios_same_solve"] = [{"scenario": name, **{f"{k}_probability_exceeds_limit": _num(v)
                                                          for k, v in probs.items()}}
                                   for name, probs in u.scenario_probabilities]
    # checks that pass as computed but whose limit the soil uncertainty exceeds with P above UNLIKELY (the terminal's
    # and the report's MARGINAL warnings)
    out["marginal"] = [{"criterion": name, "scenario": scenario or None, "probability_exceeds_limit": _num(p)}
                       for scenario, name, p in uncertain_passes(r)]
    return out


def _scenario_keys(c, name: str) -> dict:
    """The blocks the scenario ``name`` replaces and the separate electrodes it is without (empty for the case as
    written)."""
    sc = next((s for s in c.scenarios if s.name == name), None)
    return {"overrides": list(sc.overrides) if sc else [], "without": list(sc.without) if sc else []}


def _contours(r: StudyResult) -> list[dict]:
    return [{"level_v": _num(level), "lines": [[[_num(x, 7), _num(y, 7)] for x, y in line] for line in lines]}
            for level, lines in r.contours]


def _summary(r: StudyResult) -> dict:
    """The summary block of one result (for a combined result: the governing scenario's checks)."""
    t, st, me = r.touch_check, r.step_check, r.mesh_check
    summary = {
        "grid_resistance_ohm": _num(r.grid_resistance),
        "ground_potential_rise_v": _num(r.ground_potential_rise),
        "grid_current_a": _num(r.grid_current),
        "decrement_factor": _num(r.decrement_factor),
        "max_touch_voltage_v": _value(t.worst),
        "max_touch_at": _at(t.worst),
        "max_step_voltage_v": _value(st.worst),
        "max_step_at": _at(st.worst),
        "max_mesh_voltage_v": _value(me.worst),
        "max_mesh_at": _at(me.worst),
        "tolerable_touch_voltage_v": _num(r.tolerable_touch),
        "tolerable_step_voltage_v": _num(r.tolerable_step),
        "tolerable_mesh_voltage_v": _num(me.limit),
        "governing_zone": {"touch": t.zone, "step": st.zone, "mesh": me.zone if me.worst else None},
        "body_weight_kg": r.body_weight,
        "touch_ok": bool(r.touch_ok),
        "step_ok": r.step_ok,
        "mesh_ok": r.mesh_ok,
        "separate_electrodes_ok": bool(r.separate_ok),
        "all_pass": bool(r.passes),
        "zones": _zones(r),
        "criteria": _criteria(r),
        "segments": len(r.segments),
        "electrode_length_m": _num(r.segments.total_length),
    }
    summary.update(_impedance_summary(r))
    return summary


def _impedance_summary(r: StudyResult) -> dict:
    """Grid impedance, injection-point GPR and metal-potential spread (conductors with impedance), or the
    screening estimate of the spread (equipotential studies)."""
    metal = r.solution.metal
    drop = r.metal_drop
    out = {"conductor_impedance": metal is not None}
    if metal is not None:
        z = metal.solution.impedance
        lo, hi = metal.fraction(0)
        out.update({"grid_impedance_ohm": {"magnitude": _num(abs(z)), "angle_deg": _num(math.degrees(cmath.phase(z)))},
                    "injection_gpr_v": _num(r.ground_potential_rise),
                    "metal_potential_fraction": {"min": _num(lo), "max": _num(hi)}})
    if drop is not None:
        out["metal_potential_drop"] = {"fraction_of_gpr": _num(drop.fraction), "least_fraction": _num(drop.low),
                                       "feed_point": None if drop.feed is None else [_num(v) for v in drop.feed],
                                       "estimated": drop.estimated, "screened": drop.fraction is not None,
                                       "note": drop.note}
    return out


def _fault_split(r: StudyResult) -> dict | None:
    """Sf and the current of every path when the split factor came from the lines and cables."""
    d = r.current_division
    if d is None:
        return None
    fault_current = r.case.fault.current
    return {"split_factor": _num(d.split_factor), "grid_current_a": _num(abs(d.grid) * fault_current),
            "method": "current division for shield wires of long lines (Endrenyi 1963; IEEE Std 80 annex on current "
                      "division)",
            "paths": [{"name": p.name, "kind": p.kind, "current_a": _num(abs(p.current) * fault_current),
                       "far_potential_v": _num(abs(p.far_potential) * fault_current * r.decrement_factor),
                       "impedance_ohm": {"magnitude": _num(abs(p.impedance)),
                                         "angle_deg": _num(math.degrees(cmath.phase(p.impedance)))}}
                      for p in d.paths],
            "basis": d.basis}


def _solve(r) -> dict | None:
    """Where a condition's solve came from: solved now, shared with another condition, or kept from an earlier run."""
    o = r.diagnostics.solve
    if o is None:
        return None
    return {"key": o.key, "origin": o.origin, "shared_with": o.shared_with or None, "note": o.note or None,
            "text": o.describe()}


def results_dict(r: StudyResult, full_precision: bool = False) -> dict:
    """The JSON-ready results of a study (SI units: Ω, V, A, m, s, mm² where named).

    Numbers keep 6 significant digits, or every digit with ``full_precision`` (for regression comparisons).
    """
    token = _FULL_PRECISION.set(full_precision)
    try:
        return _results_dict(r)
    finally:
        _FULL_PRECISION.reset(token)


def _results_dict(r: StudyResult) -> dict:
    s = r.surface
    c = r.case
    summary = _summary(r)
    if r.scenarios:
        summary["governing_scenario"] = {"touch": r.touch_check.scenario, "step": r.step_check.scenario,
                                         "mesh": r.mesh_check.scenario if r.mesh_check.worst else None}
    probes = [{"x": _num(x), "y": _num(y), "surface_potential_v": _num(v), "touch_voltage_v": _num(t)}
              for (x, y), v, t in zip(c.probes, s.probe_potential, r.probe_touch_voltages())]
    simp = r.simplified
    simplified = None
    if simp.applicable:
        simplified = {"grid_resistance_ohm": _num(simp.grid_resistance), "mesh_voltage_v": _num(simp.mesh_voltage),
                      "step_voltage_v": _num(simp.step_voltage),
                      "factors": {k: _num(v) for k, v in simp.factors.items()}}
    err = r.discretization_error
    seg = r.segments
    leakage = [{"start": [_num(v) for v in a], "end": [_num(v) for v in b], "current_a": _num(i),
                "current_per_length_a_m": _num(i / length)}
               for a, b, i, length in zip(seg.start.tolist(), seg.end.tolist(), r.segment_currents.tolist(),
                                          seg.length.tolist())]
    return {
        "format": RESULTS_FORMAT,
        "tool": {"name": "grounding", "version": __version__},
        "case": {"file": c.source, "sha256": c.sha256, "title": c.title,
                 "inputs": [{"kind": k, "file": f, "sha256": h} for k, f, h in c.input_files()]},
        "summary": summary,
        "limits": {
            "surface_layer_factor_cs": _num(r.limits.cs),
            "surface_resistivity_ohm_m": _num(r.limits.surface_resistivity),
            "shock_duration_s": c.fault.shock_duration,
            "tolerable_touch_voltage_v": {str(w): _num(v) for w, v in r.limits.touch.items()},
            "tolerable_step_voltage_v": {str(w): _num(v) for w, v in r.limits.step.items()},
        },
        "soil": _soil(c),
        "scenarios": [{"name": x.scenario, **_scenario_keys(c, x.scenario), "summary": _summary(x),
                       "scenario_s": _num(x.timings.get("scenario_s"), 4), "solve": _solve(x)} for x in r.scenarios],
        "uncertainty": _uncertainty(r),
        "separate_electrodes": _separate(r),
        "fault_split": _fault_split(r),
        "contours": _contours(r),
        "probes": probes,
        "simplified": simplified,
        "simplified_note": None if simp.applicable else simp.reason,
        "conductor": {"required_area_mm2": _num(r.conductor.required_area_mm2),
                      "actual_area_mm2": _num(r.conductor.actual_area_mm2), "ok": bool(r.conductor.ok),
                      "sizing_current_a": _num(r.conductor.current_a),
                      "max_temperature_c": r.conductor.max_temperature,
                      "ambient_temperature_c": r.conductor.ambient_temperature,
                      "material": r.conductor.material or c.electrodes.material,
                      "element": r.conductor.element,
                      "scenario": r.conductor.scenario or None,
                      "per_scenario": [{"scenario": x.scenario, "required_area_mm2": _num(x.conductor.required_area_mm2),
                                        "sizing_current_a": _num(x.conductor.current_a), "ok": bool(x.conductor.ok),
                                        "element": x.conductor.element} for x in r.scenarios]},
        "failing": r.failures(),
        "diagnostics": {
            "assemble_s": _num(r.timings["assemble_s"], 4),
            "solve_s": _num(r.timings["solve_s"], 4),
            "surface_s": _num(r.timings["surface_s"], 4),
            "discretization_error": {"estimate_ohm": _num(err.estimate_ohm), "relative": _num(err.relative),
                                     "coarse_resistance_ohm": _num(err.coarse_resistance),
                                     "refinement_ratio": _num(err.refinement_ratio), "order": _num(err.order),
                                     "note": err.note or None},
            "voltage_error": _voltage_error(r),
            "convergence": None if r.convergence is None else {
                "converged": r.convergence.converged, "tolerance": r.convergence.tolerance,
                "note": r.convergence.note,
                "rounds": [{"max_segment_m": rd.max_segment, "resolution_m": rd.resolution, "segments": rd.segments,
                            "touch_v": _num(rd.touch), "step_v": _num(rd.step), "mesh_v": _num(rd.mesh)}
                           for rd in r.convergence.rounds]},
            "solve": _solve(r),
            "solve_relative_residual": _num(r.solution.relative_residual, 3),
            "solver": _solver(r),
            "peak_memory_mb": _num(peak_memory_mb(), 1),
            "max_segment_m": c.discretization.max_segment,
            "soil_kernel": r.kernel.describe(),
        },
        "leakage_currents": leakage,
        "warnings": list(r.warnings),
        "cautions": list(r.cautions),
    }


def _solver(r: StudyResult) -> dict:
    info = dict(r.solution.solver or {"kind": "dense"})
    out = {"kind": info.get("kind"), "iterations": info.get("iterations"),
           "relative_residual": _num(info.get("relative_residual", r.solution.relative_residual), 3),
           "operator_mb": info.get("operator_mb")}
    return out


def peak_memory_mb() -> float | None:
    """Peak resident memory of this process so far, MB (None where the platform does not say)."""
    try:
        import resource
        import sys

        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
        return peak / 1e6 if sys.platform == "darwin" else peak / 1e3     # bytes on macOS, kB on Linux
    except (ImportError, OSError, ValueError):
        return None


def results_json(r: StudyResult) -> bytes:
    """The results document as UTF-8 JSON bytes."""
    return (json.dumps(results_dict(r), indent=2, ensure_ascii=False) + "\n").encode("utf-8")
