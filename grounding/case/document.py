"""Reading a YAML case document: the parsed document with the line of every key path, and the
generic checks (mappings, numbers, vectors, lists) every section of a case uses.

Every problem is a :class:`grounding.errors.CaseError` naming the file, line, key path, what is wrong
and what would be right.
"""

from __future__ import annotations

import difflib
import math
import re
from typing import Any

import yaml

from ..errors import CaseError

#: A diameter at or above this (m) is taken for millimetres given as metres.
MM_SUSPECT_DIAMETER = 0.25
#: Shortest straight electrode piece accepted, m (also never shorter than its diameter): the thin-wire model
#: needs pieces longer than they are thick, and the geometry joins points closer than 0.1 mm.
MIN_ELECTRODE_LENGTH = 0.001
#: Physical range of every number, by unit (documented in docs/case-file.md): lengths and coordinates
#: within 10 km, resistivities 0.01 Ω·m (sea water is about 0.2) to 10^6 Ω·m (dry rock), currents up to
#: 1 MA, frequencies up to 1 kHz, voltages up to 100 MV.
UNIT_RANGES = {"m": (-1e4, 1e4), "Ω·m": (1e-2, 1e6), "A": (0.0, 1e6), "Hz": (0.0, 1e3), "V": (0.0, 1e8)}
#: Numbers in exponent form without a decimal point, which YAML 1.1 reads as text (e.g. 12e3).
_EXPONENT_NUMBER = re.compile(r"^[-+]?(\d+\.?\d*|\.\d+)[eE][-+]?\d+$")
#: Most grids, conductors or rods one list may hold.
MAX_LIST_ITEMS = 2000
#: Longest case file read, lines (several lists of MAX_LIST_ITEMS one-line items and their comments fit).
MAX_CASE_LINES = 20_000

#: Deepest burial of horizontal metal accepted, m (grids and conductors lie within a few metres of the surface; deep
#: electrodes are rods, whose length is checked on its own).
MAX_BURIAL_DEPTH = 50.0
#: Longest rod accepted, m: deep-driven or bored earth electrodes reach some tens of metres, rarely 100 m and more
#: (common practice); 300 m and more is nearly always millimetres given as metres.
MAX_ROD_LENGTH = 300.0


class _DuplicateKey(Exception):
    def __init__(self, path: str, first: int, second: int):
        super().__init__(path)
        self.path, self.first, self.second = path, first, second


class _Alias(Exception):
    """A YAML node reached a second time: an alias of an anchored value."""

    def __init__(self, path: str, line: int):
        super().__init__(path)
        self.path, self.line = path, line


class Document:
    """Parsed YAML with the line of every key path."""

    def __init__(self, file: str, data: Any, lines: dict[str, int]):
        self.file = file
        self.data = data
        self.lines = lines

    @classmethod
    def parse(cls, text: str, file: str) -> "Document":
        lines_in_file = text.count("\n") + 1
        if lines_in_file > MAX_CASE_LINES:               # refused before the (slow) parse of a file this long
            raise CaseError(file, None, "", f"has {lines_in_file:,} lines; a case file is at most {MAX_CASE_LINES:,} "
                                            f"lines (lists hold at most {MAX_LIST_ITEMS:,} items): give large layouts "
                                            "as grids or as a DXF drawing (electrodes.drawing)")
        try:
            node = yaml.compose(text, Loader=yaml.SafeLoader)
            data = yaml.safe_load(text)
        except RecursionError:
            raise CaseError(file, None, "", "is nested too deeply to be a case file; check the brackets") from None
        except yaml.MarkedYAMLError as exc:
            mark = exc.problem_mark or exc.context_mark
            line = mark.line + 1 if mark else None
            problem = exc.problem or "is not valid YAML"
            raise CaseError(file, line, "", f"YAML syntax error: {problem}; check indentation, colons and brackets") from None
        except yaml.YAMLError as exc:
            raise CaseError(file, None, "", f"YAML error: {exc}") from None
        lines: dict[str, int] = {}
        if node is not None:
            try:
                cls._index(node, "", lines, set())
            except _Alias as alias:
                raise CaseError(file, alias.line, alias.path, "uses a YAML alias (*name) of an anchored value; write the "
                                "value out: aliases are not accepted in case files (a few of them can expand a "
                                "small file without bound)") from None
            except _DuplicateKey as dup:
                raise CaseError(file, dup.second, dup.path, f"is given twice (lines {dup.first} and {dup.second}); "
                                "keep one") from None
            except RecursionError:
                raise CaseError(file, None, "", "is nested too deeply to be a case file") from None
        return cls(file, data, lines)

    @classmethod
    def _index(cls, node: yaml.Node, path: str, lines: dict[str, int], visited: set) -> None:
        if id(node) in visited and isinstance(node, (yaml.MappingNode, yaml.SequenceNode, yaml.ScalarNode)):
            parent = path
            while parent and parent not in lines:                   # the line where the alias is used
                cut = max(parent.rfind("."), parent.rfind("["))
                parent = parent[:cut] if cut > 0 else ""
            raise _Alias(path, lines.get(parent, node.start_mark.line + 1))
        visited.add(id(node))
        lines.setdefault(path, node.start_mark.line + 1)
        if isinstance(node, yaml.MappingNode):
            seen: dict[str, int] = {}
            for key_node, value_node in node.value:
                child = f"{path}.{key_node.value}" if path else str(key_node.value)
                here = key_node.start_mark.line + 1
                if str(key_node.value) in seen:
                    raise _DuplicateKey(child, seen[str(key_node.value)], here)
                seen[str(key_node.value)] = here
                lines[child] = key_node.start_mark.line + 1
                cls._index(value_node, child, lines, visited)
                lines[child] = key_node.start_mark.line + 1
        elif isinstance(node, yaml.SequenceNode):
            for i, item in enumerate(node.value):
                cls._index(item, f"{path}[{i}]", lines, visited)

    def line(self, path: str) -> int | None:
        """Line of ``path``, or of its nearest ancestor that has one."""
        while True:
            if path in self.lines:
                return self.lines[path]
            if not path:
                return None
            cut = max(path.rfind("."), path.rfind("["))
            path = path[:cut] if cut > 0 else ""

    def fail(self, path: str, problem: str) -> CaseError:
        return CaseError(self.file, self.line(path), path, problem)


def as_number(value: Any) -> Any:
    """``value`` as a float when it is text in exponent form (12e3), which YAML 1.1 leaves as text."""
    if isinstance(value, str) and _EXPONENT_NUMBER.match(value.strip()):
        return float(value)
    return value


def kind_of(value: Any) -> str:
    """What a YAML value is, in the words of a case file (not Python's type names)."""
    if value is None:
        return "nothing (an empty value)"
    if isinstance(value, bool):
        return f"true/false ({str(value).lower()})"
    if isinstance(value, (int, float)):
        return f"a number ({fmt(value)})"
    if isinstance(value, str):
        return f"text ({value[:40]!r})"
    if isinstance(value, list):
        return f"a list of {len(value)}"
    if isinstance(value, dict):
        return "a mapping of keys"
    return "a value of another kind"


def fmt(value: Any) -> str:
    """A value as quoted in a message; long ones (a list of 1 000 numbers) cut to 80 characters."""
    if isinstance(value, float):
        return f"{value:g}"
    text = repr(value) if isinstance(value, str) else str(value)
    return text if len(text) <= 80 else text[:77] + "…"


class Checks:
    """Generic checks on values of a :class:`Document`; section readers build on it."""

    def __init__(self, doc: Document):
        self.doc = doc

    # ---- generic checks -------------------------------------------------------------------
    def mapping(self, path: str, value: Any, allowed: tuple[str, ...], required: tuple[str, ...] = ()) -> dict:
        if not isinstance(value, dict):
            what = "a mapping of keys" if path else "a YAML mapping (key: value lines)"
            raise self.doc.fail(path, f"must be {what}, got {kind_of(value)}")
        for key in value:
            if key not in allowed:
                key_path = f"{path}.{key}" if path else str(key)
                near = difflib.get_close_matches(str(key), allowed, n=1, cutoff=0.5)
                hint = f"did you mean '{near[0]}'?" if near else f"known keys: {', '.join(allowed)}"
                raise self.doc.fail(key_path, f"is not a known key; {hint}")
        for key in required:
            if key not in value:
                where = f"{path}.{key}" if path else key
                raise CaseError(self.doc.file, self.doc.line(path) if path else None, where,
                                "is missing; it is required")
        return value

    def number(self, path: str, value: Any, unit: str, *, gt: float | None = None, ge: float | None = None,
               lt: float | None = None, le: float | None = None) -> float:
        u = f" {unit}" if unit else ""
        if isinstance(value, str) and _EXPONENT_NUMBER.match(value.strip()):
            value = float(value)              # YAML 1.1 reads 12e3 (no dot) as text; it is a number
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise self.doc.fail(path, f"must be a number{(' in' + u) if unit else ''}, got {fmt(value)}")
        try:
            x = float(value)
        except OverflowError:
            x = math.inf
        if not math.isfinite(x):
            raise self.doc.fail(path, f"must be a finite number, got {fmt(value)}")
        if gt is not None and not x > gt:
            raise self.doc.fail(path, f"must be > {gt:g}{u}, got {fmt(value)}")
        if ge is not None and not x >= ge:
            raise self.doc.fail(path, f"must be >= {ge:g}{u}, got {fmt(value)}")
        if lt is not None and not x < lt:
            raise self.doc.fail(path, f"must be < {lt:g}{u}, got {fmt(value)}")
        if le is not None and not x <= le:
            raise self.doc.fail(path, f"must be <= {le:g}{u}, got {fmt(value)}")
        if unit in UNIT_RANGES:
            lo, hi = UNIT_RANGES[unit]
            if not lo <= x <= hi:
                raise self.doc.fail(path, f"= {x:g} {unit} is outside the accepted range {lo:g} to {hi:g} {unit}; "
                                          "check the value and its unit")
        return x

    def integer(self, path: str, value: Any, *, ge: int = 1, le: int | None = None) -> int:
        if isinstance(value, bool) or not isinstance(value, int):
            if isinstance(value, float) and math.isfinite(value) and value.is_integer():
                value = int(value)
            else:
                raise self.doc.fail(path, f"must be a whole number, got {fmt(value)}")
        if value < ge:
            raise self.doc.fail(path, f"must be >= {ge}, got {value}")
        if le is not None and value > le:
            raise self.doc.fail(path, f"must be <= {le:,}, got {value:,}")
        return int(value)

    def vector(self, path: str, value: Any, n: int, unit: str, what: str) -> tuple[float, ...]:
        if not isinstance(value, (list, tuple)) or len(value) != n:
            raise self.doc.fail(path, f"must be a list of {n} numbers ({what}) in {unit}, got {fmt(value)}")
        return tuple(self.number(f"{path}[{i}]", v, unit) for i, v in enumerate(value))

    def flag(self, path: str, value: Any) -> bool:
        """A yes/no setting: true or false."""
        if not isinstance(value, bool):
            raise self.doc.fail(path, f"must be true or false, got {fmt(value)}")
        return value

    def sequence(self, path: str, value: Any) -> list:
        if value is None:
            return []
        if not isinstance(value, list):
            raise self.doc.fail(path, f"must be a list, got {kind_of(value)}")
        if len(value) > MAX_LIST_ITEMS:
            raise self.doc.fail(path, f"lists {len(value):,} items; at most {MAX_LIST_ITEMS:,} are accepted")
        return value

    def diameter(self, path: str, value: Any) -> float:
        d = self.number(path, value, "m", gt=0)
        if d >= MM_SUSPECT_DIAMETER:
            raise self.doc.fail(
                path, f"= {d:g} m looks like millimetres given as metres; give metres, e.g. {d / 1000:g} for {d:g} mm")
        return d

    def long_enough(self, path: str, length: float, diameter: float, what: str = "") -> float:
        """A straight electrode piece's length (m), refused when shorter than its diameter or 1 mm."""
        shortest = max(MIN_ELECTRODE_LENGTH, diameter)
        if length <= 1e-6:
            raise self.doc.fail(path, f"{what}has zero length (start = end); give two different points")
        if length < shortest:
            raise self.doc.fail(path, f"{what}is {length * 1000:.3g} mm long, shorter than "
                                      f"{'its diameter' if diameter > MIN_ELECTRODE_LENGTH else '1 mm'} "
                                      f"({shortest * 1000:g} mm): the thin-wire model needs pieces longer than "
                                      "they are thick; remove it or join it to its neighbour")
        return length

    def depth(self, path: str, value: float) -> float:
        """A burial depth of horizontal metal (grids, conductor ends), m: below the surface and not deeper than
        MAX_BURIAL_DEPTH (a larger value is nearly always millimetres given as metres)."""
        if value <= 0:
            raise self.doc.fail(path, f"depth must be > 0 m (below the ground surface; z is positive downward), "
                                      f"got {value:g}; conductors above ground are not electrodes")
        if value > MAX_BURIAL_DEPTH:
            raise self.doc.fail(path, f"= {value:g} m is deeper than {MAX_BURIAL_DEPTH:g} m: give metres (e.g. "
                                      f"{value / 1000:g} for {value:g} mm); deep electrodes are rods (electrodes.rods)")
        return value

    def name(self, path: str, value: Any) -> str:
        """A short name: one line of text."""
        if not isinstance(value, (str, int, float)) or isinstance(value, bool) or not str(value).strip():
            raise self.doc.fail(path, f"must be a name (one line of text), got {fmt(value)}")
        text = str(value).strip()
        if "\n" in text or len(text) > 80:
            raise self.doc.fail(path, "must be one line of at most 80 characters")
        return text

    def ring(self, path: str, value: Any) -> tuple[tuple[float, float], ...]:
        """A closed ring of at least 3 [x, y] corners in m (the first corner is not repeated)."""
        pts = self.sequence(path, value)
        if len(pts) < 3:
            raise self.doc.fail(path, "must be a polygon of at least 3 [x, y] corners in m")
        ring = tuple(self.vector(f"{path}[{i}]", q, 2, "m", "x, y") for i, q in enumerate(pts))
        if len(ring) > 3 and math.dist(ring[0], ring[-1]) < 1e-9:
            ring = ring[:-1]
        return ring
