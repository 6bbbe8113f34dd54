"""Outputs of a predicted (and optionally measured) fall-of-potential test: terminal text, JSON and a plot."""

from __future__ import annotations

import json

import numpy as np

from ..cautions import CAUTIONS
from ..study.fall_of_potential import RULE_618, FallOfPotential, MeasuredFit, SlopeMethod, slope_method
from ..version import __version__
from .style import new_figure


def _num(x, digits: int = 6):
    return None if x is None or not np.isfinite(x) else float(f"{x:.{digits}g}")


def _slope(sm: SlopeMethod, true: float) -> dict:
    return {"mu": _num(sm.mu), "true_resistance_ohm": _num(sm.true_resistance),
            "probe_distance_for_true_m": _num(sm.probe_distance_for_true),
            "error_fraction": None if sm.true_resistance is None else _num(sm.true_resistance / true - 1.0),
            "note": sm.note or None}


def fall_of_potential_dict(f: FallOfPotential, fit: MeasuredFit | None = None, measured=None) -> dict:
    """The JSON document (see docs/fall-of-potential.md)."""
    d, err = f.rule_618[0], f.rule_618[2]
    out = {
        "tool": {"name": "grounding", "version": __version__},
        "true_resistance_ohm": _num(f.true_resistance),
        "from_xy_m": list(f.start), "current_rod_xy_m": list(f.rod), "current_rod_distance_m": _num(f.curve.rod_distance),
        "probe_direction_deg": _num(f.direction_deg),
        "curve": [{"probe_distance_m": _num(x), "apparent_resistance_ohm": _num(r)}
                  for x, r in zip(f.curve.distances, f.curve.apparent)],
        "probe_distance_for_true_m": _num(f.probe_distance_for_true),
        "rule_618": {"probe_distance_m": _num(d), "apparent_resistance_ohm": _num(f.rule_618[1]),
                     "error_fraction": _num(err)},
        "current_rod_distance_for": {f"{int(round(t * 100))}_percent_m": _num(v) for t, v in f.planning.items()},
        "slope_method_on_prediction": _slope(slope_method(f.curve.distances, f.curve.apparent, f.curve.rod_distance),
                                             f.true_resistance) if f.along_rod else None,
        "notes": list(f.notes),
        "measured": None,
        "cautions": list(CAUTIONS),
    }
    if fit is not None:
        out["measured"] = {
            "readings": [{"probe_distance_m": _num(x), "resistance_ohm": _num(r)} for x, r in zip(*measured)],
            "resistivity_scale": _num(fit.scale), "resistivity_scale_error": _num(fit.scale_error),
            "fitted_true_resistance_ohm": _num(fit.true_resistance),
            "fitted_true_resistance_error_ohm": _num(fit.true_resistance_error),
            "residuals_ohm": [_num(x) for x in fit.residuals],
            "design_resistance_ohm": _num(f.true_resistance),
            "measured_over_design": _num(fit.scale),
            "slope_method": _slope(slope_method(measured[0], measured[1], f.curve.rod_distance), fit.true_resistance)
            if f.along_rod else None}
    return out


def fall_of_potential_json(f: FallOfPotential, fit=None, measured=None) -> bytes:
    return (json.dumps(fall_of_potential_dict(f, fit, measured), indent=1, ensure_ascii=False) + "\n").encode()


def _off_line(f: FallOfPotential) -> str:
    """Words for a traverse that does not run toward the current rod (the 61.8 % reading is taken on that line)."""
    return "" if f.along_rod else f" (on the line to the current rod; the traverse runs at {f.direction_deg:g}°)"


def fall_of_potential_text(f: FallOfPotential, fit: MeasuredFit | None = None, measured=None) -> str:
    """The terminal summary."""
    d, r618, err = f.rule_618
    lines = [f"grounding {__version__} · fall-of-potential test (IEEE Std 81), predicted",
             f"  True resistance Rg        {f.true_resistance:.4f} Ω       the grid to remote earth (the study's value)",
             f"  Current rod               ({f.rod[0]:g}, {f.rod[1]:g}) m, {f.curve.rod_distance:.1f} m from "
             f"({f.start[0]:g}, {f.start[1]:g}) m",
             f"  61.8 % rule               {r618:.4f} Ω at {d:.1f} m: {err * 100:+.2f} % from the true value"
             + _off_line(f),
             "  Curve meets Rg at         " + ("nowhere on the traverse" if f.probe_distance_for_true is None else
                                              f"{f.probe_distance_for_true:.1f} m "
                                              f"({f.probe_distance_for_true / f.curve.rod_distance * 100:.1f} % of the "
                                              "current-rod distance)")]
    if f.planning:
        plan = ", ".join(f"{t * 100:g} %: " + ("beyond the distances tried" if v is None else f"{v:.0f} m")
                         for t, v in f.planning.items())
        lines.append(f"  Current rod needed for the 61.8 % reading within {plan}")
    lines.append("  probe m    apparent Ω")
    step = max(1, len(f.curve.distances) // 12)
    for x, a in list(zip(f.curve.distances, f.curve.apparent))[::step]:
        lines.append(f"  {x:8.1f}    {a:9.4f}")
    if fit is not None:
        lines.append(f"  Measured: resistivity scale {fit.scale:.3f} ± {fit.scale_error:.3f}; fitted true resistance "
                     f"{fit.true_resistance:.4f} ± {fit.true_resistance_error:.4f} Ω against the design "
                     f"{f.true_resistance:.4f} Ω ({(fit.scale - 1) * 100:+.1f} %)")
        if measured is not None and f.along_rod:
            sm = slope_method(measured[0], measured[1], f.curve.rod_distance)
            lines.append("  Slope method on the readings: " + (sm.note if sm.true_resistance is None else
                         f"μ = {sm.mu:.3f}, {sm.true_resistance:.4f} Ω read at {sm.probe_distance_for_true:.1f} m"))
    if f.along_rod:
        sm = slope_method(f.curve.distances, f.curve.apparent, f.curve.rod_distance)
        if sm.true_resistance is not None:
            lines.append(f"  Slope method (IEEE Std 81) on the predicted curve: μ = {sm.mu:.3f}, {sm.true_resistance:.4f} Ω "
                         f"({(sm.true_resistance / f.true_resistance - 1) * 100:+.2f} %), read at "
                         f"{sm.probe_distance_for_true:.1f} m")
    lines += [f"  Note: {n}" for n in f.notes]
    lines += [f"CAUTION: {c}" for c in CAUTIONS]
    return "\n".join(lines)


def fall_of_potential_figure(f: FallOfPotential, fit: MeasuredFit | None = None, measured=None):
    """The apparent-resistance curve, the true value, the 61.8 % point and any readings."""
    fig, ax = new_figure((7.5, 4.2), 120)
    ax.plot(f.curve.distances, f.curve.apparent, color="#1f3b73", lw=1.6, label="predicted apparent resistance")
    ax.axhline(f.true_resistance, color="#4d4d4d", lw=1.0, ls="--", label=f"true Rg {f.true_resistance:.3f} Ω")
    d, r618, err = f.rule_618
    where = "" if f.along_rod else " (on the line to the current rod)"
    ax.plot([d], [r618], "o", color="#b35806", label=f"61.8 % point{where}: {r618:.3f} Ω ({err * 100:+.2f} %)")
    if f.probe_distance_for_true is not None:
        ax.axvline(f.probe_distance_for_true, color="#7f7f7f", lw=0.8, ls=":",
                   label=f"curve meets Rg at {f.probe_distance_for_true:.1f} m")
    if fit is not None:
        ax.plot(measured[0], measured[1], "s", ms=4, color="#d7301f", label="measured")
        ax.plot(measured[0], fit.scale * fit.model, color="#d7301f", lw=1.0,
                label=f"fitted (× {fit.scale:.3f}): Rg {fit.true_resistance:.3f} ± {fit.true_resistance_error:.3f} Ω")
    top = float(np.nanmax(f.curve.apparent))
    ax.set_ylim(0, 1.3 * max(top, f.true_resistance))
    ax.set_xlabel(f"probe distance from ({f.start[0]:g}, {f.start[1]:g}), m; current rod at "
                  f"{f.curve.rod_distance:.0f} m")
    ax.set_ylabel("apparent resistance (Ω)")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, loc="lower right")
    ax.set_title(f"Fall-of-potential test (IEEE Std 81), predicted; {RULE_618 * 100:.1f} % rule "
                 "— preliminary, review required", fontsize=9)
    fig.tight_layout()
    return fig
