"""Section 6 of the review report: the method and assumptions, written from what the study actually ran."""

from __future__ import annotations

from ...study.result import StudyResult


def metal_text(r: StudyResult) -> str:
    """How the metal was modelled: one equipotential body, or a network solved with the soil; separate metal."""
    c = r.case
    if r.solution.metal is not None:
        f = c.fault.frequency
        temperature = 20.0 if c.electrodes.conductor_temperature is None else c.electrodes.conductor_temperature
        text = ("The metal is not taken as one equipotential: every segment has its series impedance (resistance of "
                f"its material at {temperature:g} °C"
                + (", internal impedance by the Bessel-function formula, Neumann partial inductances"
                   if f > 0 else "") + ") and the metal and the soil are solved together as one network "
                + (f"of phasors at {f:g} Hz" if f > 0 else "(DC)")
                + ", the fault current entering at fault.injection. Touch voltage is the magnitude of the phasor "
                  "difference between the nearest energised metal and the surface. The inductances carry no "
                  "earth-return correction.")
    else:
        text = ("The energised electrodes form one equipotential body at the GPR (the conductors' impedance is "
                "neglected; the metal-drop screening below says how far that holds).")
    kinds = {"floating": "floating (zero net current; its potential is solved)",
             "remote": "tied to remote earth (0 V)", "bonded": "bonded to the energised system"}
    if c.separate_electrodes:
        text += " Separate metal: " + "; ".join(f"{e.name}, {kinds.get(e.connection, e.connection)}"
                                                for e in c.separate_electrodes) + "."
    return text


def solver_method_text(r: StudyResult) -> str:
    """The unknowns and the solver that ran, with its iterations and residual."""
    info = r.solution.solver or {"kind": "dense"}
    n, h = len(r.segments), r.case.discretization.max_segment
    text = (f"Conductors are thin wires cut into {n:,} segments of at most {h:g} m; each leaks a constant current, "
            "the unknowns of a Galerkin method of moments: R<sub>ij</sub> = 1/(L<sub>i</sub>L<sub>j</sub>) ∫∫ G ds ds′. ")
    residual = f"relative residual {r.solution.relative_residual:.1e}"
    if info.get("network"):
        if info.get("kind") == "dense":
            text += (f"R was assembled densely and the coupled metal–soil nodal system solved by LU factorisation "
                     f"({residual}; power balance {info.get('power_balance', 0.0):.0e}).")
        else:
            text += (f"R was built as a compressed operator and the coupled block system of soil, branches and nodes "
                     f"solved by GMRES (restart 60): {info.get('iterations')} iterations, {residual}, power balance "
                     f"{info.get('power_balance', 0.0):.0e}.")
    elif info.get("kind") == "iterative":
        text += (f"R i = V was solved iteratively: R as a compressed operator (a hierarchical matrix of the far field "
                 f"and an exact sparse near field, {info.get('operator_mb', 0):,.0f} MB) and conjugate gradients "
                 f"preconditioned by block Jacobi, {info.get('iterations')} iterations to a {residual}.")
    else:
        text += f"R i = V was solved by Cholesky factorisation of the dense matrix ({residual})."
    return text


def kernel_text(r: StudyResult) -> str:
    """The soil kernel that ran, with its truncation or filter."""
    d = r.kernel.describe()
    rho = d["resistivities_ohm_m"]
    kind = d["kind"]
    if kind == "TwoLayerSoil":
        text = (f"Kernel G: two-layer soil ({rho[0]:.4g} Ω·m over {rho[1]:.4g} Ω·m, interface at "
                f"{d['interfaces_m'][0]:.3g} m) by the image series of Sunde (1949) and Tagg (1964), reflection "
                f"factor {d['reflection_factor']:+.3f}, {d['series_orders']} image orders (relative tail "
                f"{d['series_tolerance']:.0e}).")
    elif len(rho) > 2 or "method" in d:
        text = (f"Kernel G: {len(rho)}-layer soil (" + ", ".join(f"{x:.4g}" for x in rho) + " Ω·m) by the Hankel "
                f"transform of the layered-earth kernel ({d.get('method', 'digital filter')}); the nearest images "
                "are taken out and integrated exactly.")
    else:
        text = f"Kernel G: uniform soil of {rho[0]:.4g} Ω·m with the image in the surface (the method of images)."
    return text + (" Near pairs are integrated exactly (closed form for parallel wires, end-clustered Gauss–Legendre "
                   "otherwise), middle pairs by Gauss–Legendre, far pairs at midpoints.")


def criteria_text(r: StudyResult) -> str:
    """The criteria asked for and their bases."""
    parts = []
    standards = r.case.criteria.standards
    if "ieee80" in standards:
        parts.append("IEEE Std 80 (Dalziel's body current for a 50 or 70 kg body, 1000 Ω body resistance, the feet's "
                     "resistance 1.5 Cs ρs in parallel for touch and 6 Cs ρs in series for step; valid for "
                     "0.03 s ≤ ts ≤ 3 s)")
    if "en50522" in standards:
        parts.append("EN 50522 (the permissible touch voltage U_Tp(tf) of its Annex B with the body impedance of "
                     "IEC/TS 60479-1 and the additional resistance of footwear and the standing surface, 1.5 m⁻¹ · ρs; "
                     "no step limit; the tabulated values were recalled from memory and must be checked against the "
                     "standards)")
    text = "Criteria: " + " and ".join(parts) + ". "
    text += ("Each surface zone has its own limits; a step belongs to the zone of its foot with the lower limit; "
             "every criterion must pass in every zone") if len(r.zones) > 1 else "One surface covering over the map"
    if r.scenarios:
        text += (f" and in every one of the {len(r.scenarios)} scenarios ("
                 + ", ".join(f"'{x.scenario}'" for x in r.scenarios) + ")")
    return text + ". The conductor size is judged for the fault current and clearing time."


def accuracy_text(r: StudyResult) -> str:
    """How sure: the error estimates and the uncertainty that were actually computed."""
    err = r.discretization_error
    if err.relative is not None:
        text = ("How sure: Rg and the worst voltages carry a discretisation-error estimate (the solve at twice the "
                "segment length, Richardson's estimate with the refinement ratio made and order p = "
                f"{err.order:.2g}, and the search on a map of twice the spacing, both with the factor of safety "
                "1.25 of Roache's grid convergence index); a limit "
                "inside that band makes the verdict marginal.")
    else:
        text = f"How sure: no discretisation-error estimate was made ({err.note})."
    if r.uncertainty is not None:
        text += (" The soil's parameter uncertainty was carried to σ and to the probability that each limit is "
                 f"exceeded (first order in the log-parameters, log-normal results; {r.uncertainty.level}).")
    else:
        text += " No soil-parameter uncertainty was given, so none was carried to the verdicts."
    return text


def provenance_text(r: StudyResult) -> str:
    """Where the solves behind the results came from: solved in this run, shared between conditions, or kept from
    an earlier run of the same model (content key)."""
    conditions = r.scenarios or (r,)
    parts = []
    for c in conditions:
        o = c.diagnostics.solve
        if o is not None:
            parts.append((f"{c.scenario}: " if r.scenarios else "") + o.describe())
    if not parts:
        return ""
    return ("Solves: " + "; ".join(parts) + ". A solve is shared or reused only when everything it depends on is "
            "equal (geometry, soil, discretisation, solver and map settings, zones and their order of severity, "
            "separate metal, tool version), so its results are those a fresh solve gives.")


def method_paragraphs(r: StudyResult) -> list[str]:
    """The method section's paragraphs (reportlab markup), in order."""
    drop = r.metal_drop
    screening = ""
    if r.solution.metal is None and drop is not None:
        screening = ("Metal-drop screening: " + (f"the metal's potential may drop by up to {drop.fraction * 100:.1f} % of "
                                                 f"the GPR ({drop.note})." if drop.fraction is not None else
                                                 f"not screened ({drop.note})."))
    surface = ("Touch voltage = potential of the metal − surface potential over the touch area; step voltage = "
               "largest potential difference between a point and the points one step away, over the whole map; "
               "mesh voltage = worst touch voltage inside the grid meshes. The soil is a half-space under "
               "insulating air; surface coverings enter the limits only, not the solve.")
    return [p for p in (metal_text(r), solver_method_text(r), kernel_text(r), surface, screening, criteria_text(r),
                        accuracy_text(r), provenance_text(r)) if p]
