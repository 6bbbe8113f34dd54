"""Load a YAML case file (format 1) and validate it into a :class:`grounding.case.Case`.

Every problem is reported as a :class:`grounding.errors.CaseError` naming the file, the line,
the key path, what is wrong and what would be right."""

from __future__ import annotations

import hashlib
import math
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import CaseError
from ..textfile import read_user_text
from .document import Document, fmt
from .drawing import DrawingSections
from .electrodes import ElectrodeSections
from .model import (
    SOLVERS,
    STANDARDS,
    CableScreenPath,
    Case,
    Costs,
    Criteria,
    Discretization,
    Electrodes,
    Fault,
    Injection,
    Layer,
    Scenario,
    ShieldWireLine,
    Soil,
    SoilUncertainty,
    SplitNetwork,
    SurfaceLayer,
    SurfaceMap,
    TouchArea,
)
from .site import SiteSections
from .sweep import sweep_settings

SUPPORTED_FORMATS = (1,)
#: Blocks a scenario may replace.
SCENARIO_BLOCKS = ("soil", "surface_layer", "surface_zones", "fault")
#: Scenario blocks merged key by key into the case's block (soil and zones are replaced whole).
MERGED_BLOCKS = ("surface_layer", "fault")
#: Most scenarios a case may list.
MAX_SCENARIOS = 20
#: Most soil layers a case may give.
MAX_LAYERS = 6


def load_case(path: str | Path) -> Case:
    """Read and validate a case file.

    Parameters
    ----------
    path : str or Path
        YAML case file.

    Returns
    -------
    Case
        The validated, immutable case.

    Raises
    ------
    CaseError
        On any problem with the file, located by line and key path.
    """
    text, sha = read_user_text(path, "a YAML case file")
    return parse_case(text, file=str(path), sha256=sha)


def parse_case(text: str, file: str = "<case>", sha256: str = "") -> Case:
    """Validate case-file text (YAML) into a :class:`Case`; ``file`` is used in messages only."""
    doc = Document.parse(text, file)
    return CaseReader(doc).read(sha256 or hashlib.sha256(text.encode("utf-8")).hexdigest())


def with_conditions_without_unrelied_metal(case: Case) -> Case:
    """The case with one more scenario per condition (the case as written and each scenario) where separate
    electrodes are marked ``rely_on: false``: the condition without them, so that the verdicts are the worse
    of the site with and without metal the owner does not control."""
    gone = tuple(e.name for e in case.separate_electrodes if not e.rely_on)
    if not gone:
        return case
    names = ", ".join(f"'{n}'" for n in gone)
    conditions = [(case.base_scenario, case)] + [(s.name, s.case) for s in case.scenarios]
    extra = []
    for name, c in conditions:
        kept = tuple(e for e in c.separate_electrodes if e.name not in gone)
        areas = []
        for t in c.surface.touch_areas:
            if t.area is not None or not t.metal:     # a polygon, or the reach around all the main metal
                areas.append(t)
            elif metal := tuple(m for m in t.metal if m not in gone):     # reach around the metal that stays
                areas.append(replace(t, metal=metal))
        areas = tuple(areas)
        without = replace(c, separate_electrodes=kept, scenarios=(), surface=replace(c.surface, touch_areas=areas))
        label = f"without {', '.join(gone)}" if not case.scenarios else f"{name} without {', '.join(gone)}"
        extra.append(Scenario(label, without, ("separate_electrodes",), gone, name))
    note = (f"separate electrode{'s' if len(gone) > 1 else ''} {names} {'are' if len(gone) > 1 else 'is'} not relied "
            "on (rely_on: false): every condition is also studied without "
            f"{'them' if len(gone) > 1 else 'it'} and the worse verdict kept")
    return replace(case, scenarios=case.scenarios + tuple(extra), notes=case.notes + (note,))


class CaseReader(ElectrodeSections, SiteSections, DrawingSections):
    """Walks the document section by section; validation happens here once, then data is trusted."""

    def __init__(self, doc: Document, fits: dict | None = None):
        super().__init__(doc)
        # soil fits by (readings file, array, layers, traverse): the options of one sweep share them
        self.fits = {} if fits is None else fits

    # ---- sections -------------------------------------------------------------------------
    def read(self, sha256: str, nested: bool = False) -> Case:
        """The validated case; ``nested`` for a scenario's own case (its conditions without separate electrodes
        that are not relied on are made once, at the top)."""
        data = self.doc.data
        if data is None:
            raise self.doc.fail("", "is empty; a case needs at least format, soil, fault and electrodes")
        top = self.mapping("", data, ("format", "title", "site", "soil", "surface_layer", "surface_zones", "fault",
                                       "criteria", "electrodes", "separate_electrodes", "discretization", "surface",
                                       "probes", "costs", "sweep", "scenarios"),
                           ("format", "soil", "fault", "electrodes"))
        version = top["format"]
        if version not in SUPPORTED_FORMATS or isinstance(version, bool):
            raise self.doc.fail("format", f"must be 1 (the only case-file format), got {fmt(version)}")
        title = top.get("title", Path(self.doc.file).stem)
        if isinstance(title, (list, dict)) or title is None:
            raise self.doc.fail("title", "must be one line of text")
        title = str(title)
        site = top.get("site", "")
        site = "" if site is None else str(site)
        soil, soil_fit = self.soil(top["soil"])
        surface_layer = self.surface_layer(top.get("surface_layer"))
        zones = self.surface_zones(top.get("surface_zones"))
        if zones and surface_layer is not None:
            raise self.doc.fail("surface_layer", "cannot stand beside surface_zones: surface_layer covers the whole "
                                                 "map; give the covering as a zone instead")
        fault = self.fault(top["fault"])
        criteria = self.criteria(top.get("criteria", {}))
        electrodes = self.electrodes(top["electrodes"], soil)
        separate = self.separate_electrodes(top.get("separate_electrodes"), electrodes)
        discretization = self.discretization(top.get("discretization", {}), electrodes, separate)
        surface = self.surface(top.get("surface", {}), electrodes, separate)
        probes = tuple(self.vector(f"probes[{i}]", p, 2, "m", "x, y")
                       for i, p in enumerate(self.sequence("probes", top.get("probes"))))
        costs = self.costs(top.get("costs"))
        notes = list(soil_fit.readings.notes) if soil_fit else []
        if electrodes.drawing is not None:
            notes.append(electrodes.drawing[2])
        if electrodes.conductor_impedance and not fault.injection:
            raise self.doc.fail("electrodes.conductor_impedance", "needs fault.injection: the point [x, y, z] in m "
                                "where the fault current enters the metal (e.g. the transformer neutral's bond)")
        if fault.x_over_r is None and fault.is_dc:
            notes.append("DC study (fault.frequency: 0): resistances only, no decrement factor (Df = 1)")
        elif fault.x_over_r is None:
            notes.append("fault.x_over_r is not given: the decrement factor Df = 1 was assumed (no DC offset), which "
                         "understates IG where the X/R is large; give the X/R at the fault")
        if surface_layer is not None:
            notes.insert(0, f"the surface layer ({surface_layer.resistivity:g} Ω·m, {surface_layer.thickness * 1000:.0f} "
                            "mm) is assumed to cover the whole map, also outside the fence; where people stand on "
                            "native soil the limits are lower: describe the site with surface_zones")
        if "sweep" in top:
            sweep_settings(self.doc)                      # validated here; expanded by load_variants
            notes.append("the sweep block is not used by a single study (the case is studied as written); "
                         "run grounding sweep or grounding design for the options")
        scenarios, base_name = self.scenarios(top.get("scenarios"), "scenarios" in top, sha256)
        case = Case(title=title, soil=soil, fault=fault, electrodes=electrodes, criteria=criteria,
                    surface_layer=surface_layer, surface_zones=zones, separate_electrodes=separate,
                    scenarios=scenarios, base_scenario=base_name, discretization=discretization, surface=surface,
                    probes=probes, soil_fit=soil_fit, costs=costs, notes=tuple(notes), site=site,
                    source=self.doc.file, sha256=sha256)
        return case if nested else with_conditions_without_unrelied_metal(case)

    def scenarios(self, value: Any, given: bool, sha256: str) -> tuple[tuple[Scenario, ...], str]:
        """The ``scenarios`` list: each entry is the case with the blocks it names replaced, validated as a
        file (messages name the scenario); an entry that replaces nothing names the case as written."""
        if not given:
            return (), "as written"
        items = self.sequence("scenarios", value)
        if not items:
            raise self.doc.fail("scenarios", "is empty; list conditions such as {name: dry summer, soil: {...}} "
                                             "or leave the key out")
        if len(items) > MAX_SCENARIOS:
            raise self.doc.fail("scenarios", f"lists {len(items)} scenarios; give at most {MAX_SCENARIOS}")
        out, names, base_name = [], {}, None
        for i, item in enumerate(items):
            p = f"scenarios[{i}]"
            m = self.mapping(p, item, ("name",) + SCENARIO_BLOCKS, ("name",))
            name = self.name(f"{p}.name", m["name"])
            if name in names:
                raise self.doc.fail(f"{p}.name", f"'{name}' is already the name of scenarios[{names[name]}]")
            names[name] = i
            blocks = tuple(k for k in SCENARIO_BLOCKS if k in m)
            if not blocks:
                if base_name is not None:
                    raise self.doc.fail(p, f"replaces nothing, like '{base_name}': the case as written is studied "
                                           "once; give this scenario a block to replace or remove it")
                base_name = name
                continue
            data = {k: v for k, v in self.doc.data.items() if k not in ("scenarios", "sweep")}
            lines = dict(self.doc.lines)
            for b in blocks:
                base_block = data.get(b)
                if b in ("surface_layer", "surface_zones") and not (b == "surface_layer" and m[b] is None):
                    other = "surface_zones" if b == "surface_layer" else "surface_layer"
                    data.pop(other, None)                          # one covering replaces the other
                if b in MERGED_BLOCKS and isinstance(base_block, dict) and isinstance(m[b], dict):
                    data[b] = {**base_block, **m[b]}               # keys not given come from the case
                else:
                    data[b] = m[b]
                prefix = f"{p}.{b}"
                for key, line in self.doc.lines.items():
                    if key == prefix or key.startswith(prefix + ".") or key.startswith(prefix + "["):
                        lines[b + key[len(prefix):]] = line
            try:
                case = CaseReader(Document(self.doc.file, data, lines), self.fits).read(
                    hashlib.sha256((sha256 + "scenario " + name).encode()).hexdigest(), nested=True)
            except CaseError as exc:
                raise CaseError(exc.file, exc.line, exc.path, f"{exc.problem} (in scenario '{name}')") from None
            case = replace(case, notes=tuple(n for n in case.notes if not n.startswith("the sweep block")))
            out.append(Scenario(name, case, blocks))
        return tuple(out), base_name or "as written"

    def costs(self, value: Any) -> Costs | None:
        if value is None:
            return None
        p = "costs"
        m = self.mapping(p, value, ("conductor_per_m", "rod_per_m", "rod_each", "surface_layer_per_m2", "currency"))
        nums = {k: self.number(f"{p}.{k}", m.get(k, 0.0), "", ge=0) for k in
                ("conductor_per_m", "rod_per_m", "rod_each", "surface_layer_per_m2")}
        return Costs(**nums, currency=str(m.get("currency", "")))

    def soil(self, value: Any):
        m = self.mapping("soil", value, ("resistivity", "layers", "readings", "array", "traverse", "uncertainty"))
        soil, fit = self._soil_model(m)
        if "uncertainty" in m:
            soil = replace(soil, uncertainty=self.soil_uncertainty(m["uncertainty"], len(soil.layers)))
        return soil, fit

    def soil_uncertainty(self, value: Any, layers: int) -> SoilUncertainty:
        p = "soil.uncertainty"
        m = self.mapping(p, value, ("resistivity", "thickness"), ("resistivity",))
        def rel(key):
            return self.number(f"{p}.{key}", m[key], "(relative 1-σ, a fraction)", gt=0, lt=1)
        rho = rel("resistivity")
        h = rel("thickness") if "thickness" in m else 0.0
        if "thickness" in m and layers == 1:
            raise self.doc.fail(f"{p}.thickness", "goes only with layered soil (uniform soil has no thickness)")
        return SoilUncertainty(rho, h)

    def _soil_model(self, m: dict):
        if "readings" in m:
            if "resistivity" in m:
                raise self.doc.fail("soil.resistivity", "cannot stand beside soil.readings; give one or the other")
            return self.fitted_soil(m)
        if sum(k in m for k in ("resistivity", "layers")) != 1:
            raise self.doc.fail("soil", "needs one of 'resistivity' (uniform soil, Ω·m), 'layers' (top to bottom) "
                                        "or 'readings' (a sounding CSV file to fit)")
        for k in ("array", "traverse"):
            if k in m:
                raise self.doc.fail(f"soil.{k}", "goes only with soil.readings")
        if "resistivity" in m:
            return Soil((Layer(self.number("soil.resistivity", m["resistivity"], "Ω·m", gt=0)),)), None
        items = self.sequence("soil.layers", m["layers"])
        if not items:
            raise self.doc.fail("soil.layers", "must list at least one layer")
        layers = []
        for i, item in enumerate(items):
            p = f"soil.layers[{i}]"
            last = i == len(items) - 1
            lm = self.mapping(p, item, ("resistivity", "thickness"), ("resistivity",))
            rho = self.number(f"{p}.resistivity", lm["resistivity"], "Ω·m", gt=0)
            if last:
                if "thickness" in lm:
                    raise self.doc.fail(f"{p}.thickness", "must be left out: the bottom layer extends to infinite depth")
                layers.append(Layer(rho))
            else:
                if "thickness" not in lm:
                    raise self.doc.fail(p, "needs a thickness in m (only the bottom layer has none)")
                layers.append(Layer(rho, self.number(f"{p}.thickness", lm["thickness"], "m", gt=0)))
        if len(layers) > MAX_LAYERS:
            raise self.doc.fail("soil.layers", f"has {len(layers)} layers; give at most {MAX_LAYERS}")
        return Soil(tuple(layers)), None

    def fitted_soil(self, m: dict):
        path = m["readings"]
        if not isinstance(path, str) or not path:
            raise self.doc.fail("soil.readings", "must be the path of a readings CSV file (relative to the case file)")
        full = Path(self.doc.file).parent / path
        array = m.get("array")
        if array is not None and array not in ("wenner", "schlumberger"):
            raise self.doc.fail("soil.array", f"must be 'wenner' or 'schlumberger', got {fmt(array)}")
        count = m.get("layers", "auto")
        if count not in (1, 2, 3, "auto") or isinstance(count, bool):
            raise self.doc.fail("soil.layers", f"with soil.readings must be the layer count to fit: 1, 2, 3 or "
                                               f"'auto', got {fmt(count)}")
        if not full.is_file():
            raise self.doc.fail("soil.readings", f"file '{full}' not found (the path is relative to the case file)")
        traverse = m.get("traverse")
        if traverse is not None and (isinstance(traverse, (dict, list, bool)) or not str(traverse).strip()):
            kind = {dict: "a mapping", list: "a list", bool: "true/false"}.get(type(traverse), "empty")
            raise self.doc.fail("soil.traverse", f"must be the name of one traverse of the readings file (e.g. "
                                                 f"traverse: east), got {kind}")
        key = (str(full.resolve()), array, count, traverse)
        if key not in self.fits:
            self.fits[key] = self._fit(full, array, count, m.get("traverse"))
        fit = self.fits[key]
        best = fit.best
        layers = tuple(Layer(l.resistivity, l.thickness) for l in best.layers)
        return Soil(layers), fit

    def _fit(self, full: Path, array, count, traverse):
        """Read a sounding, pick the traverse and fit it (the slow part of loading such a case)."""
        from ..sounding.fit import fit_soil
        from ..sounding.readings import load_readings

        readings = load_readings(full, array)
        if traverse is not None:
            mask = np.array([t == str(traverse) for t in readings.traverse])
            if not mask.any():
                names = sorted(set(readings.traverse))
                raise self.doc.fail("soil.traverse", f"'{traverse}' is not in {full}; traverses: {', '.join(names)}")
            readings = readings.subset(mask)
        return fit_soil(readings, count)

    def surface_layer(self, value: Any) -> SurfaceLayer | None:
        if value is None:
            return None
        m = self.mapping("surface_layer", value, ("resistivity", "thickness"), ("resistivity", "thickness"))
        if m["resistivity"] is None:
            raise self.doc.fail("surface_layer.resistivity", "must be a number in Ω·m, got None")
        return self.layer("surface_layer", m)

    def fault(self, value: Any) -> Fault:
        m = self.mapping("fault", value, ("current", "sources", "split_factor", "split", "x_over_r", "frequency",
                                          "clearing_time", "shock_duration", "injection"), ("clearing_time",))
        if ("current" in m) == ("sources" in m):
            raise self.doc.fail("fault", "needs either current (3·I0, A) or sources (a list of {name, current, x_over_r})")
        sources = ()
        if "sources" in m:
            items = self.sequence("fault.sources", m["sources"])
            if not items:
                raise self.doc.fail("fault.sources", "is empty; list the contributions {name, current, x_over_r}")
            out = []
            for i, item in enumerate(items):
                p = f"fault.sources[{i}]"
                sm = self.mapping(p, item, ("name", "current", "x_over_r"), ("name", "current"))
                xr_i = None if sm.get("x_over_r") is None else self.number(f"{p}.x_over_r", sm["x_over_r"], "", ge=0,
                                                                             le=200)
                out.append((self.name(f"{p}.name", sm["name"]), self.number(f"{p}.current", sm["current"], "A", gt=0),
                            xr_i))
            sources = tuple(out)
            current = sum(c for _, c, _ in sources)
            if "x_over_r" in m:
                raise self.doc.fail("fault.x_over_r", "cannot stand beside fault.sources; give each source its x_over_r")
        else:
            current = self.number("fault.current", m["current"], "A", gt=0)
        tf = self.number("fault.clearing_time", m["clearing_time"], "s", gt=0, le=30)
        ts = self.number("fault.shock_duration", m["shock_duration"], "s", ge=0.03, le=3.0) \
            if "shock_duration" in m else tf
        if not 0.03 <= ts <= 3.0:
            raise self.doc.fail("fault.clearing_time", f"= {ts:g} s is outside 0.03 s to 3 s, where Dalziel's "
                                "body-current limit holds; give fault.shock_duration within that range")
        basis = ""
        if "split" in m:
            if "split_factor" in m:
                raise self.doc.fail("fault.split", "cannot stand beside fault.split_factor; give one or the other")
            network = None
            if isinstance(m["split"], dict) and ("lines" in m["split"] or "cables" in m["split"]):
                network = self.split_network(m["split"])
            sm = {} if network else self.mapping("fault.split", m["split"], ("remote_current", "local_current"),
                                                 ("remote_current", "local_current"))
        if "split" in m and network:
            sf = 1.0
        elif "split" in m:
            remote = self.number("fault.split.remote_current", sm["remote_current"], "A", gt=0)
            local = self.number("fault.split.local_current", sm["local_current"], "A", ge=0)
            sf = remote / (remote + local)
            basis = (f"Sf = remote / (remote + local) = {remote:g} / ({remote:g} + {local:g}) A: the current fed from "
                     "local sources circulates in the grid; only the remote contribution returns through the earth")
        else:
            sf = self.number("fault.split_factor", m.get("split_factor", 1.0), "", gt=0, le=1)
        if sources:
            given = [x for _, _, x in sources if x is not None]
            xr = max(given) if given else None
            names = ", ".join(f"{n} {c / 1000:g} kA" + (f" X/R {x:g}" if x is not None else "") for n, c, x in sources)
            basis = (basis + "; " if basis else "") + (f"3I0 = sum of the sources ({names}), taken in phase "
                                                       "(conservative); X/R the largest given")
        else:
            xr = m.get("x_over_r")
            xr = None if xr is None else self.number("fault.x_over_r", xr, "", ge=0, le=200)
        f = self.number("fault.frequency", m.get("frequency", 50.0), "Hz", ge=0)
        if f == 0 and xr is not None:
            raise self.doc.fail("fault.x_over_r", "has no meaning in a DC study (fault.frequency: 0); leave it out")
        injection = self.injection(m["injection"]) if "injection" in m else ()
        return Fault(current=current, clearing_time=tf, shock_duration=ts, split_factor=sf, x_over_r=xr, frequency=f,
                     sources=sources, split_basis=basis, injection=injection,
                     split_network=network if "split" in m else None)

    def injection(self, value: Any) -> tuple[Injection, ...]:
        """``fault.injection``: one point [x, y, z] (m), or a list of {point, share} whose shares sum to 1."""
        p = "fault.injection"

        def point(path, v):
            n = 2 if isinstance(v, list) and len(v) == 2 else 3
            return self.vector(path, v, n, "m", "x, y" if n == 2 else "x, y, depth")

        if isinstance(value, list) and len(value) in (2, 3) and not any(isinstance(v, (dict, list)) for v in value):
            return (Injection(point(p, value), 1.0, p, self.doc.line(p)),)
        items = self.sequence(p, value)
        if not items:
            raise self.doc.fail(p, "is empty; give the point [x, y, z] in m where the fault current enters the metal")
        out = []
        for i, item in enumerate(items):
            q = f"{p}[{i}]"
            im = self.mapping(q, item, ("point", "share"), ("point", "share"))
            out.append(Injection(point(f"{q}.point", im["point"]),
                                 self.number(f"{q}.share", im["share"], "", gt=0, le=1), q, self.doc.line(q)))
        total = sum(x.share for x in out)
        if abs(total - 1.0) > 1e-6:
            raise self.doc.fail(p, f"shares sum to {total:g}; they must sum to 1")
        return tuple(out)

    def split_network(self, value: dict) -> SplitNetwork:
        """``fault.split`` as the lines and cables that carry fault current away (impedances per km)."""
        p = "fault.split"
        m = self.mapping(p, value, ("lines", "cables"))

        def per_km(path, v):
            r, x = self.vector(path, v, 2, "Ω/km", "R, X")
            if r < 0 or x < 0:
                raise self.doc.fail(path, f"must be [R, X] in Ω/km with R, X >= 0, got [{r:g}, {x:g}]")
            return complex(r, x) / 1000.0

        lines, cables = [], []
        for i, item in enumerate(self.sequence(f"{p}.lines", m.get("lines"))):
            q = f"{p}.lines[{i}]"
            lm = self.mapping(q, item, ("name", "spans", "span_length", "shield_wire_impedance_per_km",
                                        "coupling_to_phase_per_km", "tower_footing_resistance", "share"),
                              ("name", "spans", "span_length", "shield_wire_impedance_per_km",
                               "tower_footing_resistance"))
            zs = per_km(f"{q}.shield_wire_impedance_per_km", lm["shield_wire_impedance_per_km"])
            if zs == 0:
                raise self.doc.fail(f"{q}.shield_wire_impedance_per_km", "must not be zero")
            zm = per_km(f"{q}.coupling_to_phase_per_km", lm["coupling_to_phase_per_km"]) \
                if "coupling_to_phase_per_km" in lm else 0j
            if abs(zm) > abs(zs):
                raise self.doc.fail(f"{q}.coupling_to_phase_per_km", "is larger than the shield wire's own impedance; "
                                    "the mutual impedance is at most the self impedance")
            lines.append(ShieldWireLine(
                self.name(f"{q}.name", lm["name"]), self.integer(f"{q}.spans", lm["spans"], ge=1, le=10_000),
                self.number(f"{q}.span_length", lm["span_length"], "m", gt=0), zs, zm,
                self.number(f"{q}.tower_footing_resistance", lm["tower_footing_resistance"], "Ω", gt=0, le=1e4),
                self.number(f"{q}.share", lm.get("share", 1.0), "", ge=0, le=1), q))
        for i, item in enumerate(self.sequence(f"{p}.cables", m.get("cables"))):
            q = f"{p}.cables[{i}]"
            cm = self.mapping(q, item, ("name", "length", "screen_impedance_per_km", "remote_earth_resistance"),
                              ("name", "length", "screen_impedance_per_km", "remote_earth_resistance"))
            zc = per_km(f"{q}.screen_impedance_per_km", cm["screen_impedance_per_km"])
            cables.append(CableScreenPath(
                self.name(f"{q}.name", cm["name"]), self.number(f"{q}.length", cm["length"], "m", gt=0), zc,
                self.number(f"{q}.remote_earth_resistance", cm["remote_earth_resistance"], "Ω", ge=0, le=1e4), q))
        if not lines and not cables:
            raise self.doc.fail(p, "lists no lines or cables; give the paths that carry fault current away")
        shares = sum(x.share for x in lines)
        if lines and shares > 1 + 1e-6:
            raise self.doc.fail(f"{p}.lines", f"shares of the fault current sum to {shares:g}; at most 1")
        return SplitNetwork(tuple(lines), tuple(cables))

    def criteria(self, value: Any) -> Criteria:
        m = self.mapping("criteria", value or {}, ("body_weight", "standard", "footwear_resistance"))
        w = m.get("body_weight", 70)
        if w not in (50, 70) or isinstance(w, bool):
            raise self.doc.fail("criteria.body_weight", f"must be 50 or 70 (kg, IEEE Std 80), got {fmt(w)}")
        given = m.get("standard", "ieee80")
        items = given if isinstance(given, list) else [given]
        if not items:
            raise self.doc.fail("criteria.standard", "is empty; give ieee80, en50522 or both as a list")
        for s in items:
            if s not in STANDARDS:
                raise self.doc.fail("criteria.standard", f"must be one of {', '.join(STANDARDS)} (or a list of them), "
                                                         f"got {fmt(s)}")
        if len(set(items)) != len(items):
            raise self.doc.fail("criteria.standard", "lists a standard twice")
        footwear = self.number("criteria.footwear_resistance", m.get("footwear_resistance", 1000.0), "Ω", ge=0,
                               le=1e5)
        if "footwear_resistance" in m and "en50522" not in items:
            raise self.doc.fail("criteria.footwear_resistance", "is used by the en50522 criterion only; add it to "
                                                                "criteria.standard or leave the key out")
        return Criteria(int(w), tuple(items), footwear)

    def discretization(self, value: Any, electrodes: Electrodes, separate=()) -> Discretization:
        m = self.mapping("discretization", value or {}, ("max_segment", "solver"))
        s = self.number("discretization.max_segment", m.get("max_segment", 1.0), "m", gt=0)
        diameters = [x.diameter for e in (electrodes, *separate) for x in e.grids + e.conductors + e.rods]
        if s < 4 * max(diameters):
            raise self.doc.fail("discretization.max_segment", f"= {s:g} m is shorter than 4 conductor diameters "
                                f"({4 * max(diameters):g} m); the thin-wire kernel needs longer segments")
        solver = m.get("solver", "auto")
        if solver not in SOLVERS:
            raise self.doc.fail("discretization.solver", f"= {solver!r} is not a solver; use one of {', '.join(SOLVERS)}")
        return Discretization(s, solver)

    def surface(self, value: Any, electrodes: Electrodes, separate=()) -> SurfaceMap:
        p = "surface"
        m = self.mapping(p, value or {}, ("margin", "resolution", "touch_reach", "touch_area", "touch_areas",
                                          "step_distance", "profile", "contours"))
        margin = self.number(f"{p}.margin", m.get("margin", 3.0), "m", ge=0)
        res = self.number(f"{p}.resolution", m.get("resolution", 0.5), "m", gt=0)
        reach = self.number(f"{p}.touch_reach", m.get("touch_reach", 1.0), "m", ge=0)
        step = self.number(f"{p}.step_distance", m.get("step_distance", 1.0), "m", gt=0)
        if "touch_area" in m and "touch_areas" in m:
            raise self.doc.fail(f"{p}.touch_area", "cannot stand beside touch_areas; list the polygon there")
        areas: tuple[TouchArea, ...] = ()
        if m.get("touch_area") is not None:                 # one polygon: the original form of the key
            areas = (TouchArea(area=self.area(p, m, "touch_area")),)
        elif "touch_areas" in m:
            areas = self.touch_areas(f"{p}.touch_areas", m["touch_areas"], electrodes, separate)
        profile = m.get("profile")
        if profile is not None:
            if not isinstance(profile, list) or len(profile) != 2:
                raise self.doc.fail(f"{p}.profile", "must be two [x, y] points in m: [[x0, y0], [x1, y1]]")
            profile = tuple(self.vector(f"{p}.profile[{i}]", q, 2, "m", "x, y") for i, q in enumerate(profile))
            if math.dist(*profile) < 1e-6:
                raise self.doc.fail(f"{p}.profile", "has zero length; give two different points")
        contours = self.contours(f"{p}.contours", m.get("contours"))
        return SurfaceMap(margin=margin, resolution=res, touch_reach=reach, touch_areas=areas, step_distance=step,
                          profile=profile, contours=contours)
