"""The study case: immutable dataclasses describing soil, fault, criteria and electrodes (SI units)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from ..sounding.fit import SoilFit

Point2 = tuple[float, float]
Point3 = tuple[float, float, float]


@dataclass(frozen=True)
class Layer:
    """One horizontal soil layer.

    Attributes
    ----------
    resistivity : float
        Ω·m.
    thickness : float or None
        m; None for the bottom layer, which extends to infinite depth.
    """

    resistivity: float
    thickness: float | None = None


@dataclass(frozen=True)
class SoilUncertainty:
    """Relative 1-σ uncertainty of every layer resistivity and thickness (fractions), given by the user."""

    resistivity: float
    thickness: float = 0.0


@dataclass(frozen=True)
class Soil:
    """Horizontally layered soil, top to bottom; one layer means uniform soil. ``uncertainty`` is the
    user's relative 1-σ per parameter (None: from the sounding fit, if any)."""

    layers: tuple[Layer, ...]
    uncertainty: SoilUncertainty | None = None

    @property
    def is_uniform(self) -> bool:
        """True when the soil is one layer, or all layers have the same resistivity."""
        return len({layer.resistivity for layer in self.layers}) == 1

    @property
    def interface_depths(self) -> tuple[float, ...]:
        """Depths of the layer interfaces below the surface, m."""
        depths, z = [], 0.0
        for layer in self.layers[:-1]:
            z += layer.thickness
            depths.append(z)
        return tuple(depths)

    @property
    def top_resistivity(self) -> float:
        """Resistivity of the top layer, Ω·m."""
        return self.layers[0].resistivity


@dataclass(frozen=True)
class SurfaceLayer:
    """A thin high-resistivity surface layer (crushed rock, asphalt), used for the Cs derating."""

    resistivity: float
    thickness: float


@dataclass(frozen=True)
class Area:
    """A plane polygon with optional holes, corners in m.

    Attributes
    ----------
    shell : tuple of (x, y)
        Outer boundary, in order around the area.
    holes : tuple of tuple of (x, y)
        Boundaries of holes inside the shell.
    """

    shell: tuple[Point2, ...]
    holes: tuple[tuple[Point2, ...], ...] = ()


#: Name of the zone of native soil outside every listed surface zone.
NATIVE_ZONE = "native"


@dataclass(frozen=True)
class SurfaceZone:
    """Part of the site surface with its own covering (crushed rock, asphalt, concrete) or none.

    Attributes
    ----------
    name : str
        Zone name as printed.
    area : Area or None
        Where the zone lies; None means everywhere (the whole-map ``surface_layer`` of a case).
    layer : SurfaceLayer or None
        The covering; None means people stand on the native soil (Cs = 1).
    key : str
        Key path in the case file, for messages.
    body_weight : int or None
        kg (50 or 70) of the people the zone's limits are for (e.g. 50 kg for the public outside the fence);
        None: the criteria's body weight.
    """

    name: str
    area: Area | None
    layer: SurfaceLayer | None
    key: str = ""
    body_weight: int | None = None

    def weight(self, default: int) -> int:
        """The body weight the zone's verdicts use, kg."""
        return default if self.body_weight is None else self.body_weight


@dataclass(frozen=True)
class Injection:
    """Where (part of) the fault current enters the electrode metal.

    Attributes
    ----------
    point : (x, y, z)
        On the axis of a main-system conductor or rod, m (z the depth).
    share : float
        Fraction of the grid current entering here; the shares of a fault sum to 1.
    key : str
        Key path in the case file.
    line : int or None
        Line in the case file, for messages.
    """

    point: Point3
    share: float = 1.0
    key: str = ""
    line: int | None = None


@dataclass(frozen=True)
class ShieldWireLine:
    """An overhead line whose shield wire(s) and tower footings carry part of the fault current away.

    Attributes
    ----------
    name : str
        As printed.
    spans : int
        Number of spans to the remote end.
    span_length : float
        m.
    shield_impedance : complex
        Self impedance of the shield wire(s) with earth return, Ω/m.
    coupling : complex
        Mutual impedance between the faulted phase and the shield wire(s) with earth return, Ω/m
        (0: coupling ignored, which is conservative).
    footing_resistance : float
        Tower footing resistance, Ω.
    share : float
        Fraction of the fault current that arrives over this line's phase conductor.
    key : str
        Key path in the case file.
    """

    name: str
    spans: int
    span_length: float
    shield_impedance: complex
    coupling: complex
    footing_resistance: float
    share: float = 1.0
    key: str = ""


@dataclass(frozen=True)
class CableScreenPath:
    """A cable whose screen (sheath) is bonded to the grid here and earthed at the remote end.

    Attributes
    ----------
    name : str
        As printed.
    length : float
        m.
    screen_impedance : complex
        Screen impedance with earth return, Ω/m.
    remote_earth_resistance : float
        Earthing resistance at the remote end, Ω.
    key : str
        Key path in the case file.
    """

    name: str
    length: float
    screen_impedance: complex
    remote_earth_resistance: float
    key: str = ""


@dataclass(frozen=True)
class SplitNetwork:
    """The paths that carry fault current away from the grid; the split factor follows from them and
    the grid impedance (see :mod:`grounding.safety.current_division`)."""

    lines: tuple[ShieldWireLine, ...] = ()
    cables: tuple[CableScreenPath, ...] = ()


@dataclass(frozen=True)
class Fault:
    """Earth-fault data.

    Attributes
    ----------
    current : float
        Symmetrical rms earth-fault current 3·I0, A.
    split_factor : float
        Sf, share of the fault current that the grid sends into the soil.
    x_over_r : float or None
        X/R ratio at the fault; None means no DC offset (Df = 1).
    frequency : float
        System frequency, Hz; 0 means a DC study (resistance only, Df = 1).
    clearing_time : float
        Fault duration tf, s (decrement factor, conductor heating).
    shock_duration : float
        Shock duration ts, s (body-current limit).
    sources : tuple of (name, current A, X/R or None)
        The contributions 3·I0 is the sum of, when given per source.
    split_basis : str
        Where Sf came from, in words (empty: given as a number).
    injection : tuple of Injection
        Where the fault current enters the metal (used when the conductors' impedance is modelled).
    split_network : SplitNetwork or None
        Lines and cables from which Sf is computed (``split_factor`` is then a placeholder of 1).
    """

    current: float
    clearing_time: float
    shock_duration: float
    split_factor: float = 1.0
    x_over_r: float | None = None
    frequency: float = 50.0
    sources: tuple[tuple[str, float, float | None], ...] = ()
    split_basis: str = ""
    injection: tuple[Injection, ...] = ()
    split_network: SplitNetwork | None = None

    @property
    def is_dc(self) -> bool:
        """True for a DC study (frequency 0)."""
        return self.frequency == 0.0


#: Safety criteria a study can judge by.
STANDARDS = ("ieee80", "en50522")
#: Solvers of the electrode system (see :class:`Discretization`).
SOLVERS = ("auto", "dense", "iterative")


@dataclass(frozen=True)
class Criteria:
    """Safety criteria.

    Attributes
    ----------
    body_weight : int
        50 or 70 kg, for IEEE Std 80 Dalziel limits.
    standards : tuple of str
        ``ieee80`` and/or ``en50522``; the first one's verdicts are the summary's.
    footwear_resistance : float
        EN 50522 additional resistance of footwear R_a1, Ω.
    """

    body_weight: int = 70
    standards: tuple[str, ...] = ("ieee80",)
    footwear_resistance: float = 1000.0


class _Sized:
    """Cross-section of an element with a ``diameter`` (m) and an optional nominal ``cross_section`` (m²)."""

    diameter: float
    cross_section: float | None

    @property
    def area(self) -> float:
        """Cross-section for sizing and quantities, m²: the nominal one, else the circle of the diameter."""
        return self.cross_section if self.cross_section is not None else math.pi * self.diameter ** 2 / 4


@dataclass(frozen=True)
class Grid(_Sized):
    """A rectangular mesh of buried conductors.

    Attributes
    ----------
    origin : (float, float)
        Corner with the smallest x and y, m.
    size : (float, float)
        Side lengths along x and y, m.
    meshes : (int, int)
        Number of meshes along x and y.
    depth : float
        Burial depth, m.
    diameter : float
        Conductor diameter, m.
    key : str
        Key path in the case file, for messages.
    """

    origin: Point2
    size: Point2
    meshes: tuple[int, int]
    depth: float
    diameter: float
    key: str = ""
    name: str = ""
    cross_section: float | None = None
    material: str = ""


@dataclass(frozen=True)
class Conductor(_Sized):
    """A straight buried conductor from ``start`` to ``end`` (x, y, depth in m), diameter in m;
    ``name`` is optional (touch areas may refer to it)."""

    start: Point3
    end: Point3
    diameter: float
    key: str = ""
    name: str = ""
    cross_section: float | None = None
    material: str = ""


@dataclass(frozen=True)
class Rod(_Sized):
    """A vertical rod: ``top`` (x, y, depth in m), length and diameter in m; ``name`` optional."""

    top: Point3
    length: float
    diameter: float
    key: str = ""
    name: str = ""
    cross_section: float | None = None
    material: str = ""


@dataclass(frozen=True)
class Electrodes:
    """All buried metal, bonded into one equipotential system.

    Attributes
    ----------
    material : str
        Conductor material name from the IEEE Std 80 material table.
    ambient_temperature : float
        °C, for conductor sizing.
    max_temperature : float or None
        Maximum allowable conductor temperature, °C; None means the material's fusing temperature.
    drawing : (file, SHA-256, note) or None
        The DXF drawing some of the conductors and rods were read from.
    conductor_impedance : bool
        Model the series impedance of the metal (the electrodes are then not one equipotential).
    conductor_temperature : float or None
        Conductor temperature for its resistance, °C; None means 20 °C.
    """

    material: str
    grids: tuple[Grid, ...] = ()
    conductors: tuple[Conductor, ...] = ()
    rods: tuple[Rod, ...] = ()
    ambient_temperature: float = 40.0
    max_temperature: float | None = None
    drawing: tuple[str, str, str] | None = None
    conductor_impedance: bool = False
    conductor_temperature: float | None = None


#: How a separate electrode is connected: not at all, to remote earth, or to the main system.
CONNECTIONS = ("floating", "remote", "bonded")


@dataclass(frozen=True)
class SeparateElectrode:
    """Buried metal that is not (necessarily) part of the energised system: an isolated fence, a pipe,
    a cable screen earthed far away.

    Attributes
    ----------
    name : str
        As printed.
    connection : str
        ``floating`` (potential unknown, net current zero), ``remote`` (tied to remote earth, 0 V) or
        ``bonded`` (part of the main system).
    grids, conductors, rods
        Its metal, as for :class:`Electrodes`.
    key : str
        Key path in the case file.
    line : int or None
        Line of its entry in the case file, for messages.
    rely_on : bool
        False for metal the owner does not control (a water main, a neighbour's cable screen) that may be
        removed or replaced by plastic one day: every condition is then also studied without it (a scenario
        of its own) and the worse verdict kept.
    """

    name: str
    connection: str
    grids: tuple[Grid, ...] = ()
    conductors: tuple[Conductor, ...] = ()
    rods: tuple[Rod, ...] = ()
    key: str = ""
    line: int | None = None
    rely_on: bool = True


@dataclass(frozen=True)
class TouchArea:
    """Where a person can touch the main system's metal: an explicit area, or everything within
    ``reach`` (m) of named metal together with the meshes that metal forms.

    Attributes
    ----------
    area : Area or None
        Explicit area.
    reach : float or None
        Reach around the metal, m (when ``area`` is None).
    metal : tuple of str
        Key-path prefixes of the metal (e.g. ``electrodes.conductors[2]``, ``separate_electrodes[0]``);
        empty means all metal of the main system.
    """

    area: Area | None = None
    reach: float | None = None
    metal: tuple[str, ...] = ()


@dataclass(frozen=True)
class Discretization:
    """Segmentation control and solver choice.

    Attributes
    ----------
    max_segment : float
        Longest segment, m.
    solver : str
        ``auto`` (the dense Cholesky solve up to a size where it is fast and safe, the compressed
        operator with conjugate gradients above), ``dense`` or ``iterative``.
    refine_rod_ends : bool
        Cut each rod's end segments again at a quarter and a half of their length (the leakage density rises
        steeply at a rod's ends); off only for the soil-uncertainty sensitivities' coarser solves.
    """

    max_segment: float = 1.0
    solver: str = "auto"
    refine_rod_ends: bool = True


@dataclass(frozen=True)
class SurfaceMap:
    """Where surface potentials are mapped and how touch and step voltages are defined.

    Attributes
    ----------
    margin : float
        Map area = electrode footprint grown by this margin, m.
    resolution : float
        Map point spacing, m.
    touch_reach : float
        A person can touch grounded metal from the grid meshes and from up to this distance
        outside any conductor, m (the default touch area; also the reach around separate electrodes).
    touch_areas : tuple of TouchArea
        Where touch voltages of the main system count; empty means the default (meshes of the
        ``electrodes`` grids and conductors plus ``touch_reach`` around all main-system metal).
    step_distance : float
        Step length, m.
    profile : ((x, y), (x, y)) or None
        Line along which the potential profile is reported, m; None means the map's diagonal.
    contours : tuple of float
        Surface-potential levels (V) whose contour lines are drawn and written out.
    """

    margin: float = 3.0
    resolution: float = 0.5
    touch_reach: float = 1.0
    touch_areas: tuple[TouchArea, ...] = ()
    step_distance: float = 1.0
    profile: tuple[Point2, Point2] | None = None
    contours: tuple[float, ...] = ()


@dataclass(frozen=True)
class Costs:
    """Unit prices for comparing layouts (any one currency).

    Attributes
    ----------
    conductor_per_m : float
        Buried horizontal conductor, installed, per m.
    rod_per_m : float
        Rod, per m of length.
    rod_each : float
        Per rod (driving, connection).
    surface_layer_per_m2 : float
        Surface layer over the touch area, per m² and per 0.1 m of thickness.
    currency : str
        Label printed with costs.
    """

    conductor_per_m: float = 0.0
    rod_per_m: float = 0.0
    rod_each: float = 0.0
    surface_layer_per_m2: float = 0.0
    currency: str = ""


@dataclass(frozen=True)
class Scenario:
    """A condition the layout must also pass (a season, a wet surface layer, a future fault level): the
    case with some of its soil, surface_layer, surface_zones and fault blocks replaced.

    Attributes
    ----------
    name : str
        As printed.
    case : Case
        The whole case under this condition (validated like a file).
    overrides : tuple of str
        The blocks the scenario replaces.
    without : tuple of str
        For a condition made because separate electrodes are not relied on (``rely_on: false``): their names.
    of : str
        Then the condition it is made from (the case as written's name, or a scenario's).
    """

    name: str
    case: "Case"
    overrides: tuple[str, ...] = ()
    without: tuple[str, ...] = ()
    of: str = ""


@dataclass(frozen=True)
class Case:
    """A whole study case, as validated from a case file.

    ``scenarios`` lists the conditions besides the case as written (named ``base_scenario``); a
    criterion passes only if it passes in all of them.
    """

    title: str
    soil: Soil
    fault: Fault
    electrodes: Electrodes
    criteria: Criteria = field(default_factory=Criteria)
    surface_layer: SurfaceLayer | None = None
    surface_zones: tuple[SurfaceZone, ...] = ()
    separate_electrodes: tuple[SeparateElectrode, ...] = ()
    discretization: Discretization = field(default_factory=Discretization)
    surface: SurfaceMap = field(default_factory=SurfaceMap)
    probes: tuple[Point2, ...] = ()
    soil_fit: SoilFit | None = None
    costs: Costs | None = None
    scenarios: tuple[Scenario, ...] = ()
    base_scenario: str = "as written"
    notes: tuple[str, ...] = ()
    site: str = ""
    source: str = ""
    sha256: str = ""

    def input_files(self) -> tuple[tuple[str, str, str], ...]:
        """Every file besides the case file that the case read, as (kind, path, SHA-256): the DXF drawing
        ("drawing") and the sounding readings of the case and of its scenarios ("readings"), each once."""
        out = []
        if self.electrodes.drawing is not None:
            out.append(("drawing", self.electrodes.drawing[0], self.electrodes.drawing[1]))
        for c in (self, *(s.case for s in self.scenarios)):
            if c.soil_fit is not None:
                out.append(("readings", c.soil_fit.readings.source, c.soil_fit.readings.sha256))
        return tuple(dict.fromkeys(out))

    @property
    def zones(self) -> tuple[SurfaceZone, ...]:
        """Every surface zone a verdict is evaluated in, the native soil last.

        Without ``surface_zones`` the whole map is one zone: the ``surface_layer`` (everywhere) or the
        native soil. With zones, the native soil outside all of them is the zone named ``native``.
        """
        if not self.surface_zones:
            if self.surface_layer is not None:
                return (SurfaceZone("surface layer (whole map)", None, self.surface_layer, "surface_layer"),)
            return (SurfaceZone(NATIVE_ZONE, None, None),)
        return self.surface_zones + (SurfaceZone(NATIVE_ZONE, None, None),)
