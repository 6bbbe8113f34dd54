"""Solves kept between runs: a content-addressed store of what a solve produced (the segment currents and group
values per volt of GPR, the surface map and every zone's worst points at 1 V, the discretisation-error estimate).

The key is the SHA-256 of everything the solve depends on (:class:`~grounding.study.conditions.SolveKey`: geometry,
soil, discretisation and solver settings, map settings, zones' areas and severity order, separate metal), the
options of the solve (error estimate, metal-drop screening), the tool's version and this store's format. An edit
of limits, fault data, body weight, coverings that keep the zones' order, or outputs therefore finds the entry.

Storage: ``diskcache`` (SQLite index, values in files; process-safe, bounded in size, least recently used out)
in ``GROUNDING_CACHE_DIR`` or the user's cache directory (``platformdirs``, which honours ``XDG_CACHE_HOME``).
Each value is a checksum and numpy's own ``.npz`` format, read with ``allow_pickle=False``; the store refuses any
pickled entry. An entry whose checksum, format, version or key does not match is deleted and ignored with a note,
never trusted. Studies with conductor impedance are not stored (the metal network's state is not serialised)."""

from __future__ import annotations

import dataclasses
import hashlib
import io
import json
import os
from pathlib import Path

import numpy as np
import shapely

from ..case.model import Case
from ..geometry.segments import segment
from ..kernels import make_kernel
from ..solve.equipotential import Solution
from ..surface.results import Extreme, MetalTouch, Profile, SurfaceResult, ZoneExtremes
from ..version import __version__
from .metal_drop import MetalDrop
from .result import DiscretizationError

#: Format of a stored entry (raise when the layout of the arrays or the header changes).
FORMAT = 2


def tool_version(root: Path = Path(__file__).resolve().parents[1]) -> str:
    """The tool's version and a SHA-256 of its own source files (``root``: the package), e.g. '0.1.0+3f2a…': an
    entry is trusted only by the code that wrote it, so a change of the search or the solve between releases (an
    install from a newer commit with the same version number) never reuses results the old code computed."""
    digest = hashlib.sha256()
    for f in sorted(root.rglob("*.py")):
        digest.update(f.relative_to(root).as_posix().encode() + b"\0" + f.read_bytes() + b"\0")
    return f"{__version__}+{digest.hexdigest()[:16]}"


#: This installation's :func:`tool_version`, written into and required of every entry.
TOOL_VERSION = tool_version()
#: Bound of the store's size on disk, bytes (least recently used entries leave first).
SIZE_LIMIT = 2 ** 30
#: First bytes of every value.
MAGIC = b"GRNDSOLV"


def cache_directory() -> Path:
    """Where solves are kept: ``GROUNDING_CACHE_DIR``, else the user's cache directory + ``grounding/solves``."""
    override = os.environ.get("GROUNDING_CACHE_DIR")
    if override:
        return Path(override)
    import platformdirs
    return Path(platformdirs.user_cache_dir("grounding", appauthor=False)) / "solves"


def _canonical(value):
    """A JSON-able form of a key part: dataclasses by class and fields, tuples as lists, floats exact."""
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {"@": type(value).__name__,
                **{f.name: _canonical(getattr(value, f.name)) for f in dataclasses.fields(value)}}
    if isinstance(value, (list, tuple)):
        return [_canonical(v) for v in value]
    if isinstance(value, dict):
        return {str(k): _canonical(v) for k, v in sorted(value.items(), key=lambda kv: str(kv[0]))}
    if isinstance(value, np.ndarray):
        return _canonical(value.tolist())
    if isinstance(value, (np.floating, np.integer)):
        return value.item()
    if value is None or isinstance(value, (str, bool, int, float)):
        return value
    raise TypeError(f"cannot key a {type(value).__name__}")


def entry_key(solve_key, estimate_error: bool, screen_drop: bool) -> str:
    """The SHA-256 (hex) that names a solve's entry."""
    doc = {"format": FORMAT, "version": TOOL_VERSION, "estimate_error": bool(estimate_error),
           "screen_drop": bool(screen_drop), "solve": _canonical(solve_key)}
    return hashlib.sha256(json.dumps(doc, sort_keys=True, allow_nan=True).encode()).hexdigest()


def _extreme(e: Extreme | None):
    return None if e is None else [e.value, e.x, e.y, e.map_check, e.segment_check, e.richardson]


def _unextreme(v) -> Extreme | None:
    return None if v is None else Extreme(*v)


def _fingerprint(segments) -> str:
    """SHA-256 of the segments' end points (m): a restored entry must meet the same segments."""
    return hashlib.sha256(np.ascontiguousarray(np.hstack([segments.start, segments.end])).tobytes()).hexdigest()


def encode(key: str, unit) -> bytes:
    """A :class:`~grounding.study.conditions.UnitStudy` of an equipotential study as a stored value."""
    sol, s = unit.solution, unit.surface
    arrays = {"currents": sol.currents_per_volt, "group_potential": sol.group_potential,
              "group_current": sol.group_current, "x": s.x, "y": s.y, "potential": s.potential, "touch": s.touch,
              "step": s.step, "probe_potential": s.probe_potential, "profile_distance": s.profile.distance,
              "profile_x": s.profile.x, "profile_y": s.profile.y, "profile_potential": s.profile.potential,
              "touch_area": np.frombuffer(shapely.to_wkb(s.touch_area), np.uint8),
              "meshes": np.frombuffer(shapely.to_wkb(s.meshes), np.uint8)}
    if s.zone_labels is not None:
        arrays["zone_labels"] = s.zone_labels
    if s.probe_touch is not None:
        arrays["probe_touch"] = s.probe_touch
    err, drop = unit.error, unit.drop
    header = {"format": FORMAT, "version": TOOL_VERSION, "key": key, "segments": len(unit.segments),
              "fingerprint": _fingerprint(unit.segments), "resistance": sol.resistance,
              "relative_residual": sol.relative_residual, "solver": _canonical(sol.solver),
              "max": [_extreme(s.max_touch), _extreme(s.max_step), _extreme(s.max_mesh)],
              "zones": [[_extreme(z.touch), _extreme(z.step), _extreme(z.mesh)] for z in s.zones],
              "metal": [[_extreme(t) for t in m.touch] for m in s.metal],
              "error": dataclasses.asdict(err), "timings": _canonical(unit.timings),
              "drop": None if drop is None else _canonical(dataclasses.asdict(drop))}
    arrays["header"] = np.frombuffer(json.dumps(header).encode(), np.uint8)
    buffer = io.BytesIO()
    np.savez(buffer, **arrays)
    payload = buffer.getvalue()
    return MAGIC + hashlib.sha256(payload).digest() + payload


class EntryRefused(Exception):
    """A stored value that must not be trusted (why, in words)."""


def decode(value, key: str, case: Case) -> tuple:
    """What a stored value holds, for ``case``: (segments, kernel, solution, surface, error, timings, drop), the
    fields of a :class:`~grounding.study.conditions.UnitStudy`; raises :class:`EntryRefused` when it must not be
    trusted."""
    if not isinstance(value, bytes) or not value.startswith(MAGIC):
        raise EntryRefused("not a solve entry")
    digest, payload = value[len(MAGIC):len(MAGIC) + 32], value[len(MAGIC) + 32:]
    if hashlib.sha256(payload).digest() != digest:
        raise EntryRefused("it fails its checksum")
    try:
        arrays = np.load(io.BytesIO(payload), allow_pickle=False)
        header = json.loads(arrays["header"].tobytes().decode())
    except Exception as exc:                                       # a damaged archive: never trusted
        raise EntryRefused(f"it cannot be read ({type(exc).__name__})") from None
    if header.get("format") != FORMAT or header.get("version") != TOOL_VERSION:
        raise EntryRefused(f"it was written by another version ({header.get('version')}, format {header.get('format')})")
    if header.get("key") != key:
        raise EntryRefused("its key does not match")
    segments = segment(case)
    if len(segments) != header["segments"] or _fingerprint(segments) != header["fingerprint"]:
        raise EntryRefused("its segments differ from this case's")
    kernel = make_kernel(case.soil, case.discretization.max_segment)
    solution = Solution(arrays["currents"], header["resistance"], header["relative_residual"],
                        arrays["group_potential"], arrays["group_current"], header["solver"])
    mt, ms, mm = (_unextreme(v) for v in header["max"])
    surface = SurfaceResult(
        arrays["x"], arrays["y"], arrays["potential"], arrays["touch"], arrays["step"],
        shapely.from_wkb(arrays["touch_area"].tobytes()), shapely.from_wkb(arrays["meshes"].tobytes()), mt, ms, mm,
        arrays["probe_potential"], Profile(arrays["profile_distance"], arrays["profile_x"], arrays["profile_y"],
                                           arrays["profile_potential"]),
        tuple(ZoneExtremes(*(_unextreme(v) for v in z)) for z in header["zones"]),
        tuple(MetalTouch(tuple(_unextreme(v) for v in m)) for m in header["metal"]),
        arrays["zone_labels"] if "zone_labels" in arrays else None,
        arrays["probe_touch"] if "probe_touch" in arrays else None)
    drop = header["drop"]
    if drop is not None:
        drop = MetalDrop(**{**drop, "feed": None if drop["feed"] is None else tuple(drop["feed"])})
    return (segments, kernel, solution, surface, DiscretizationError(**header["error"]), dict(header["timings"]),
            drop)


def _safe_disk():
    """diskcache's Disk that stores bytes as they are and refuses to unpickle anything."""
    import diskcache
    from diskcache.core import MODE_PICKLE

    class SafeDisk(diskcache.Disk):
        def fetch(self, mode, filename, value, read):
            if mode == MODE_PICKLE:
                raise EntryRefused("it is a pickled value (refused)")
            return super().fetch(mode, filename, value, read)

    return SafeDisk


class SolveCache:
    """The store of solves in ``directory`` (default :func:`cache_directory`), bounded to ``size_limit`` bytes."""

    def __init__(self, directory: Path | None = None, size_limit: int = SIZE_LIMIT):
        import diskcache
        self.directory = Path(directory) if directory is not None else cache_directory()
        self.directory.mkdir(parents=True, exist_ok=True)
        self.store = diskcache.Cache(str(self.directory), size_limit=size_limit,
                                     eviction_policy="least-recently-used", disk=_safe_disk())

    def get(self, key: str, case: Case):
        """(the fields of a UnitStudy or None, note): the entry for ``key``, or None and why it was not used
        (empty: absent)."""
        try:
            value = self.store.get(key, default=None, retry=True)
            if value is None:
                return None, ""
            return decode(value, key, case), ""
        except EntryRefused as why:
            self.store.delete(key, retry=True)
            return None, f"a cached solve (key {key[:12]}) was ignored and removed: {why}"

    def put(self, key: str, unit) -> None:
        """Keep a solve (equipotential studies only)."""
        self.store.set(key, encode(key, unit), retry=True)

    def get_sensitivities(self, key: str) -> dict | None:
        """Soil-uncertainty sensitivities kept under ``key`` (see :func:`grounding.study.uncertainty.sensitivity_key`),
        or None (absent, or not to be trusted: then removed)."""
        try:
            value = self.store.get(key, default=None, retry=True)
        except EntryRefused:
            value = b""
        if value is None:
            return None
        try:
            if not value.startswith(MAGIC):
                raise ValueError
            digest, payload = value[len(MAGIC):len(MAGIC) + 32], value[len(MAGIC) + 32:]
            doc = json.loads(payload.decode())
            if hashlib.sha256(payload).digest() != digest or doc["version"] != TOOL_VERSION or doc["format"] != FORMAT \
                    or doc["key"] != key:
                raise ValueError
            return {k: [float(x) for x in v] for k, v in doc["sensitivities"].items()}
        except (ValueError, KeyError, TypeError, AttributeError, UnicodeDecodeError):
            self.store.delete(key, retry=True)
            return None

    def put_sensitivities(self, key: str, sensitivities: dict) -> None:
        """Keep soil-uncertainty sensitivities (JSON with the same checksum and version check as solves)."""
        payload = json.dumps({"format": FORMAT, "version": TOOL_VERSION, "key": key,
                              "sensitivities": sensitivities}).encode()
        self.store.set(key, MAGIC + hashlib.sha256(payload).digest() + payload, retry=True)

    def clear(self) -> int:
        """Remove every entry; returns how many there were."""
        return int(self.store.clear(retry=True))

    def info(self) -> tuple[int, int]:
        """(entries, bytes on disk)."""
        return len(self.store), int(self.store.volume())

    def close(self) -> None:
        self.store.close()


class MemoryCache:
    """The same interface as :class:`SolveCache`, held in this process only (nothing written): lets a sequence of
    studies (the rounds of ``--converge``) reuse their solves when no store between runs is used."""

    def __init__(self):
        self.units, self.sensitivities = {}, {}

    def get(self, key: str, case: Case):
        unit = self.units.get(key)
        return (None if unit is None else tuple(getattr(unit, f.name) for f in dataclasses.fields(unit))), ""

    def put(self, key: str, unit) -> None:
        self.units[key] = unit

    def get_sensitivities(self, key: str) -> dict | None:
        return self.sensitivities.get(key)

    def put_sensitivities(self, key: str, sensitivities: dict) -> None:
        self.sensitivities[key] = sensitivities


def cacheable(case: Case) -> str:
    """Empty when a case's solve can be kept, else why not."""
    if case.electrodes.conductor_impedance:
        return "conductor impedance (the metal network's state is not stored)"
    return ""
