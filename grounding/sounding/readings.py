"""Readings files (CSV): Wenner or Schlumberger soundings, validated row by row.

A header row names the columns; lines starting with '#' are comments. Wenner: `spacing` (m) and
`resistance` (Ω) or `apparent_resistivity` (Ω·m), optional `probe_depth` (m). Schlumberger:
`current_half_spacing` (AB/2, m), `potential_half_spacing` (MN/2, m) and `resistance` or
`apparent_resistivity`. Optional `traverse` (a name) groups readings taken along different lines.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import CaseError
from ..textfile import read_user_text
from .forward import schlumberger_geometric_factor, wenner_geometric_factor

WENNER, SCHLUMBERGER = "wenner", "schlumberger"
#: Largest apparent resistivity accepted, Ω·m (dry rock and ice reach about 10⁵–10⁶ Ω·m; a larger value is a
#: misread or a wrong unit, and would overflow the fit).
MAX_APPARENT_RESISTIVITY = 1e7
KNOWN_COLUMNS = ("spacing", "current_half_spacing", "potential_half_spacing", "resistance", "apparent_resistivity",
                 "probe_depth", "traverse")
#: Probe depth below which the simple 2πaR form is used (fraction of the spacing).
SHALLOW_PROBE = 0.05
#: Two readings at one spacing differing by more than this factor are flagged.
REPEAT_FACTOR = 2.0


@dataclass(frozen=True)
class Readings:
    """A validated sounding.

    Attributes
    ----------
    array : str
        'wenner' or 'schlumberger'.
    spacing : ndarray
        Wenner a, or Schlumberger AB/2, m.
    potential_half : ndarray or None
        Schlumberger MN/2, m.
    apparent_resistivity : ndarray
        ρa, Ω·m.
    traverse : tuple of str
        Traverse name of each reading ('' when not given).
    rows : tuple of int
        File line of each reading, for messages.
    conversion : str
        How resistances were turned into ρa.
    notes : tuple of str
        Flags raised while reading (repeated spacings that disagree).
    source, sha256 : str
        The file and the SHA-256 of its bytes.
    """

    array: str
    spacing: np.ndarray
    potential_half: np.ndarray | None
    apparent_resistivity: np.ndarray
    traverse: tuple[str, ...]
    rows: tuple[int, ...]
    conversion: str
    notes: tuple[str, ...] = field(default=())
    source: str = ""
    sha256: str = ""

    def __len__(self) -> int:
        return len(self.spacing)

    def subset(self, mask: np.ndarray) -> "Readings":
        """The readings where ``mask`` is true."""
        idx = np.flatnonzero(mask)
        return Readings(self.array, self.spacing[idx],
                        None if self.potential_half is None else self.potential_half[idx],
                        self.apparent_resistivity[idx], tuple(self.traverse[i] for i in idx),
                        tuple(self.rows[i] for i in idx), self.conversion, self.notes, self.source, self.sha256)


def load_readings(path: str | Path, array: str | None = None) -> Readings:
    """Read and validate a readings CSV file.

    Parameters
    ----------
    path : str or Path
        The CSV file.
    array : str, optional
        'wenner' or 'schlumberger'; by default recognised from the columns.

    Raises
    ------
    CaseError
        Naming the file, the row and the column of the problem.
    """
    text, sha = read_user_text(path, "a readings CSV file", encoding="utf-8-sig")
    return parse_readings(text, str(path), array, sha)


def parse_readings(text: str, file: str = "<readings>", array: str | None = None, sha256: str = "") -> Readings:
    """Validate readings CSV text (see :func:`load_readings`)."""
    lines = [(i + 1, line) for i, line in enumerate(text.splitlines())
             if line.strip() and not line.lstrip().startswith("#")]
    if not lines:
        raise CaseError(file, None, "", "has no header row and no readings")
    head_line, head = lines[0]
    columns = [c.strip().lower() for c in next(csv.reader([head]))]
    if len(columns) == 1 and any(sep in head for sep in ";\t"):
        raise CaseError(file, head_line, "header", "is not comma-separated; save the readings as CSV with commas")
    for c in columns:
        if c not in KNOWN_COLUMNS:
            import difflib
            near = difflib.get_close_matches(c, KNOWN_COLUMNS, n=1, cutoff=0.5)
            hint = f"did you mean '{near[0]}'?" if near else f"known columns: {', '.join(KNOWN_COLUMNS)}"
            raise CaseError(file, head_line, f"column '{c}'", f"is not a known column; {hint}")
    repeated = sorted({c for c in columns if columns.count(c) > 1})
    if repeated:
        raise CaseError(file, head_line, f"column '{repeated[0]}'", "appears twice in the header; give each column "
                                                                   "once (readings would be paired wrongly)")
    detected = SCHLUMBERGER if "current_half_spacing" in columns else WENNER if "spacing" in columns else None
    if array is None:
        array = detected
    if array not in (WENNER, SCHLUMBERGER):
        raise CaseError(file, head_line, "header", "needs a 'spacing' column (Wenner) or 'current_half_spacing' and "
                                                   "'potential_half_spacing' columns (Schlumberger)")
    needed = ["spacing"] if array == WENNER else ["current_half_spacing", "potential_half_spacing"]
    for c in needed:
        if c not in columns:
            raise CaseError(file, head_line, "header", f"has no '{c}' column, which a {array} sounding needs")
    if ("resistance" in columns) == ("apparent_resistivity" in columns):
        raise CaseError(file, head_line, "header", "needs exactly one of the columns 'resistance' (Ω) and "
                                                   "'apparent_resistivity' (Ω·m)")
    values = {c: [] for c in columns}
    rows = []
    for line_no, line in lines[1:]:
        cells = next(csv.reader([line]))
        if len(cells) != len(columns):
            raise CaseError(file, line_no, "row", f"has {len(cells)} values for {len(columns)} columns")
        rows.append(line_no)
        for c, cell in zip(columns, cells):
            cell = cell.strip()
            if c == "traverse":
                values[c].append(cell)
                continue
            try:
                x = float(cell)
            except ValueError:
                raise CaseError(file, line_no, f"column '{c}'", f"must be a number, got '{cell}'") from None
            if not math.isfinite(x) or (x < 0 if c == "probe_depth" else x <= 0):
                bound = ">= 0" if c == "probe_depth" else "> 0"
                raise CaseError(file, line_no, f"column '{c}'", f"must be {bound}, got {cell}")
            values[c].append(x)
    if not rows:
        raise CaseError(file, head_line, "", "has a header but no readings")
    get = lambda c: np.array(values[c], float)  # noqa: E731
    traverse = tuple(values.get("traverse", [""] * len(rows)))
    if array == WENNER:
        spacing, half = get("spacing"), None
    else:
        spacing, half = get("current_half_spacing"), get("potential_half_spacing")
        bad = np.flatnonzero(half >= spacing)
        if len(bad):
            raise CaseError(file, rows[bad[0]], "column 'potential_half_spacing'",
                            "must be smaller than current_half_spacing (MN/2 < AB/2)")
    if "apparent_resistivity" in columns:
        rho_a, conversion = get("apparent_resistivity"), "apparent resistivity given in the file"
    else:
        R = get("resistance")
        with np.errstate(over="ignore", invalid="ignore"):   # an absurd reading is refused below, not warned about
            if array == SCHLUMBERGER:
                rho_a, conversion = R * schlumberger_geometric_factor(spacing, half), "π (L² − l²)/(2l) · R"
            elif "probe_depth" in columns and np.any(get("probe_depth") > SHALLOW_PROBE * spacing):
                rho_a = R * wenner_geometric_factor(spacing, get("probe_depth"))
                conversion = "full four-pin factor with probe depth (IEEE Std 81)"
            else:
                rho_a, conversion = 2 * np.pi * spacing * R, "2π a R (probe depth small against spacing)"
    implausible = np.flatnonzero(~np.isfinite(rho_a) | (rho_a > MAX_APPARENT_RESISTIVITY))
    if len(implausible):
        k = implausible[0]
        raise CaseError(file, rows[k], "row", f"gives an apparent resistivity of {rho_a[k]:.3g} Ω·m, beyond the "
                                              f"{MAX_APPARENT_RESISTIVITY:.0e} Ω·m of dry rock and ice: check the "
                                              "reading and its unit (Ω, not mΩ or kΩ)")
    notes = _repeated_spacings(spacing, half, rho_a, traverse, rows)
    return Readings(array, spacing, half, rho_a, traverse, tuple(rows), conversion, tuple(notes), file, sha256)


def _repeated_spacings(spacing, half, rho_a, traverse, rows) -> list[str]:
    """Flags for readings at the same spacing (and traverse) that differ by more than REPEAT_FACTOR."""
    notes = []
    key = [(t, round(s, 9), None if half is None else round(h, 9))
           for t, s, h in zip(traverse, spacing, half if half is not None else [None] * len(spacing))]
    groups: dict = {}
    for i, k in enumerate(key):
        groups.setdefault(k, []).append(i)
    for (t, s, _), idx in groups.items():
        if len(idx) > 1:
            vals = rho_a[idx]
            if vals.max() / vals.min() > REPEAT_FACTOR:
                where = ", ".join(f"line {rows[i]}" for i in idx)
                notes.append(f"spacing {s:g} m{f' (traverse {t})' if t else ''} is repeated with apparent "
                             f"resistivities {vals.min():.0f}–{vals.max():.0f} Ω·m ({where}); check those readings")
    return notes


def readings_from_arrays(array: str, spacing, apparent_resistivity, potential_half=None) -> Readings:
    """Readings built in code (tests, synthetic soundings)."""
    spacing = np.asarray(spacing, float)
    return Readings(array, spacing, None if potential_half is None else np.asarray(potential_half, float),
                    np.asarray(apparent_resistivity, float), ("",) * len(spacing),
                    tuple(range(1, len(spacing) + 1)), "given")
