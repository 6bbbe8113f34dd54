"""The study case: immutable dataclasses describing soil, fault, criteria and electrodes (SI units)."""

from __future__ import annotations

from dataclasses import dataclass, field

from .sounding.fit import SoilFit

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
class Soil:
    """Horizontally layered soil, top to bottom; one layer means uniform soil."""

    layers: tuple[Layer, ...]

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
        System frequency, Hz.
    clearing_time : float
        Fault duration tf, s (decrement factor, conductor heating).
    shock_duration : float
        Shock duration ts, s (body-current limit).
    """

    current: float
    clearing_time: float
    shock_duration: float
    split_factor: float = 1.0
    x_over_r: float | None = None
    frequency: float = 50.0


@dataclass(frozen=True)
class Criteria:
    """Safety criteria: body weight (50 or 70 kg) for IEEE Std 80 Dalziel limits."""

    body_weight: int = 70


@dataclass(frozen=True)
class Grid:
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


@dataclass(frozen=True)
class Conductor:
    """A straight buried conductor from ``start`` to ``end`` (x, y, depth in m), diameter in m."""

    start: Point3
    end: Point3
    diameter: float
    key: str = ""


@dataclass(frozen=True)
class Rod:
    """A vertical rod: ``top`` (x, y, depth in m), length and diameter in m."""

    top: Point3
    length: float
    diameter: float
    key: str = ""


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
    """

    material: str
    grids: tuple[Grid, ...] = ()
    conductors: tuple[Conductor, ...] = ()
    rods: tuple[Rod, ...] = ()
    ambient_temperature: float = 40.0
    max_temperature: float | None = None


@dataclass(frozen=True)
class Discretization:
    """Segmentation control: longest segment, m."""

    max_segment: float = 1.0


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
        outside any conductor, m (the default touch area).
    touch_area : tuple of (x, y) or None
        Explicit touch-area polygon, m; replaces the default when given.
    step_distance : float
        Step length, m.
    profile : ((x, y), (x, y)) or None
        Line along which the potential profile is reported, m; None means the map's diagonal.
    """

    margin: float = 3.0
    resolution: float = 0.5
    touch_reach: float = 1.0
    touch_area: tuple[Point2, ...] | None = None
    step_distance: float = 1.0
    profile: tuple[Point2, Point2] | None = None


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
class Case:
    """A whole study case, as validated from a case file."""

    title: str
    soil: Soil
    fault: Fault
    electrodes: Electrodes
    criteria: Criteria = field(default_factory=Criteria)
    surface_layer: SurfaceLayer | None = None
    discretization: Discretization = field(default_factory=Discretization)
    surface: SurfaceMap = field(default_factory=SurfaceMap)
    probes: tuple[Point2, ...] = ()
    soil_fit: SoilFit | None = None
    costs: Costs | None = None
    notes: tuple[str, ...] = ()
    site: str = ""
    source: str = ""
    sha256: str = ""
