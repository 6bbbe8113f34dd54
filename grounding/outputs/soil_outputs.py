"""Outputs of a soil fit: the terminal text, the JSON document and the sounding plot."""

from __future__ import annotations

import json

import numpy as np

from ..cautions import CAUTIONS
from ..sounding.fit import FittedModel, SoilFit, forward
from ..sounding.readings import WENNER, Readings
from .style import new_figure

SOIL_FORMAT = 1


def _pct(u: float | None) -> str:
    if u is None:
        return ""
    return "unresolved" if not np.isfinite(u) or u >= 1.0 else f"± {u * 100:.0f} %"


def model_layers(model: FittedModel) -> list[dict]:
    """Layers as `{resistivity, thickness}` (Ω·m, m) top to bottom, the last without thickness."""
    return [{"resistivity": float(f"{l.resistivity:.5g}"), **({"thickness": float(f"{l.thickness:.4g}")}
                                                              if l.thickness is not None else {})}
            for l in model.layers]


def model_dict(model: FittedModel) -> dict:
    """A fitted model for JSON."""
    def unc(u):
        return None if u is None or not np.isfinite(u) else float(f"{u * 100:.3g}")
    return {"layers": model_layers(model), "rms_misfit_percent": float(f"{model.rms_misfit_percent:.3g}"),
            "bic": float(f"{model.bic:.5g}"), "parameters": model.parameters, "resolved": model.resolved,
            "uncertainty_percent": [{"resistivity": unc(l.resistivity_uncertainty),
                                     **({"thickness": unc(l.thickness_uncertainty)} if l.thickness is not None else {})}
                                    for l in model.layers]}


def readings_list(r: Readings, model: FittedModel) -> list[dict]:
    """The readings used, with the recommended model's value and the down-weighted flag."""
    pred = forward(r, model.resistivities, model.thicknesses)
    out = []
    for i in range(len(r)):
        item = {"line": r.rows[i], "apparent_resistivity": float(f"{r.apparent_resistivity[i]:.6g}"),
                "model_apparent_resistivity": float(f"{pred[i]:.6g}"), "down_weighted": bool(model.down_weighted[i])}
        if r.array == WENNER:
            item = {"spacing": float(r.spacing[i]), **item}
        else:
            item = {"current_half_spacing": float(r.spacing[i]), "potential_half_spacing": float(r.potential_half[i]),
                    **item}
        if r.traverse[i]:
            item["traverse"] = r.traverse[i]
        out.append(item)
    return out


def fit_dict(fit: SoilFit) -> dict:
    """The JSON-ready description of one fit."""
    return {"array": fit.readings.array, "conversion": fit.readings.conversion,
            "recommended": {"layers": model_layers(fit.best), "layer_count": fit.recommended, "reason": fit.reason},
            "models": [{"layer_count": n, **model_dict(m)} for n, m in sorted(fit.models.items())],
            "noise_scale_percent": float(f"{fit.noise * 100:.3g}"),
            "readings": readings_list(fit.readings, fit.best), "notes": list(fit.readings.notes)}


def soil_json(fits: dict[str, SoilFit], source: str, sha256: str) -> bytes:
    """The `grounding soil --json` document: one fit, or one per traverse under `traverses`."""
    doc = {"format": SOIL_FORMAT, "readings_file": source, "sha256": sha256}
    if list(fits) == [""]:
        doc.update(fit_dict(fits[""]))
    else:
        doc["traverses"] = [{"traverse": name, **fit_dict(f)} for name, f in fits.items()]
    doc["cautions"] = list(CAUTIONS)
    return (json.dumps(doc, indent=2, ensure_ascii=False) + "\n").encode("utf-8")


def fit_text(fit: SoilFit, name: str = "") -> str:
    """Readable summary of one fit."""
    r = fit.readings
    lines = [f"Sounding{f' (traverse {name})' if name else ''}: {r.array}, {len(r)} readings; "
             f"apparent resistivity: {r.conversion}"]
    for n, m in sorted(fit.models.items()):
        mark = "  <- recommended" if n == fit.recommended else ""
        lines.append(f"  {n}-layer model: RMS misfit {m.rms_misfit_percent:.1f} %, BIC {m.bic:.1f}{mark}")
        depth = 0.0
        for i, l in enumerate(m.layers, start=1):
            if l.thickness is not None:
                lines.append(f"    layer {i}: {l.resistivity:9.1f} Ω·m {_pct(l.resistivity_uncertainty):>12}   "
                             f"{l.thickness:7.2f} m {_pct(l.thickness_uncertainty):>12}   "
                             f"(to {depth + l.thickness:.2f} m)")
                depth += l.thickness
            else:
                where = f"below {depth:.2f} m" if depth else "uniform"
                lines.append(f"    layer {i}: {l.resistivity:9.1f} Ω·m {_pct(l.resistivity_uncertainty):>12}   {where}")
    lines.append(f"  Recommended: {fit.recommended}-layer model. Why: {fit.reason}.")
    down = np.flatnonzero(fit.best.down_weighted)
    if len(down):
        lines.append("  Down-weighted readings (residual above 3σ, σ = "
                     f"{fit.noise * 100:.1f} %): " + ", ".join(f"line {r.rows[i]} (spacing {r.spacing[i]:g} m, "
                                                              f"{fit.best.residuals[i] * 100:+.0f} %)" for i in down))
    for note in r.notes:
        lines.append(f"  Note: {note}")
    return "\n".join(lines)


#: Marker and colour per traverse when several are drawn on one plot.
TRAVERSE_STYLES = (("o", "#1f3b73"), ("s", "#b35806"), ("^", "#1b7837"), ("D", "#5e3c99"), ("v", "#d7301f"))


def fit_figure(fit: SoilFit, title: str = ""):
    """Readings and model curves on log–log axes; down-weighted readings drawn hollow in red."""
    r = fit.readings
    fig, ax = new_figure(figsize=(6.5, 4.2), dpi=160)
    keep = ~fit.best.down_weighted
    names = list(dict.fromkeys(r.traverse))
    if len(names) > 1:
        # several traverses fitted together: each with its own marker, so a reviewer sees whether they agree
        traverse = np.array(r.traverse, dtype=object)
        for k, name in enumerate(names):
            marker, color = TRAVERSE_STYLES[k % len(TRAVERSE_STYLES)]
            sel = keep & (traverse == name)
            ax.loglog(r.spacing[sel], r.apparent_resistivity[sel], marker, color=color, ms=4.5, ls="none",
                      label=f"readings, traverse {name or '(unnamed)'}")
    else:
        ax.loglog(r.spacing[keep], r.apparent_resistivity[keep], "o", color="black", ms=4.5, label="readings")
    if (~keep).any():
        ax.loglog(r.spacing[~keep], r.apparent_resistivity[~keep], "o", mfc="none", mec="#d7301f", ms=7,
                  label="down-weighted")
    dense = np.geomspace(r.spacing.min() / 1.3, r.spacing.max() * 1.3, 120)
    if r.array == WENNER:
        curve_readings = Readings(WENNER, dense, None, np.ones_like(dense), ("",) * len(dense),
                                  tuple(range(len(dense))), "")
    else:
        ratio = np.median(r.potential_half / r.spacing)
        curve_readings = Readings(r.array, dense, dense * ratio, np.ones_like(dense), ("",) * len(dense),
                                  tuple(range(len(dense))), "")
    styles = {1: ("#999999", ":"), 2: ("#1f3b73", "--"), 3: ("#b35806", "-.")}
    for n, m in sorted(fit.models.items()):
        c, ls = styles.get(n, ("gray", "-"))
        lw = 2.2 if n == fit.recommended else 1.0
        ax.loglog(dense, forward(curve_readings, m.resistivities, m.thicknesses), color=c, ls=ls, lw=lw,
                  label=f"{n}-layer, misfit {m.rms_misfit_percent:.1f} %{' (recommended)' if n == fit.recommended else ''}")
    ax.set_xlabel("electrode spacing a (m)" if r.array == WENNER else "AB/2 (m)")
    ax.set_ylabel("apparent resistivity (Ω·m)")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=7)
    ax.set_title(title or f"{r.array.capitalize()} sounding and fitted models", fontsize=10)
    fig.tight_layout()
    return fig


def traverses_figure(fits: dict):
    """Several traverses fitted separately on one log–log plot: each traverse's readings with its own marker
    and its recommended model's curve in the same colour."""
    fig, ax = new_figure(figsize=(6.5, 4.2), dpi=160)
    array = None
    for k, (name, fit) in enumerate(sorted(fits.items())):
        marker, color = TRAVERSE_STYLES[k % len(TRAVERSE_STYLES)]
        r = fit.readings
        array = r.array
        ax.loglog(r.spacing, r.apparent_resistivity, marker, color=color, ms=4.5, ls="none", label=f"{name}: readings")
        dense = np.geomspace(r.spacing.min() / 1.3, r.spacing.max() * 1.3, 120)
        if r.array == WENNER:
            cr = Readings(WENNER, dense, None, np.ones_like(dense), ("",) * len(dense), tuple(range(len(dense))), "")
        else:
            ratio = np.median(r.potential_half / r.spacing)
            cr = Readings(r.array, dense, dense * ratio, np.ones_like(dense), ("",) * len(dense),
                          tuple(range(len(dense))), "")
        m = fit.best
        ax.loglog(dense, forward(cr, m.resistivities, m.thicknesses), color=color, lw=1.6,
                  label=f"{name}: {fit.recommended}-layer, misfit {m.rms_misfit_percent:.1f} %")
    ax.set_xlabel("electrode spacing a (m)" if array == WENNER else "AB/2 (m)")
    ax.set_ylabel("apparent resistivity (Ω·m)")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=7)
    ax.set_title("Traverses fitted separately", fontsize=10)
    fig.tight_layout()
    return fig
