"""Results of earlier studies read back from their results JSON, so that an option command need not solve a
case again when the study's ``--json`` results are given.

A results file is reused only when it is the study of exactly the case being compared: the same case-file
SHA-256, the same SHA-256 of every file the case reads (DXF drawing, sounding readings), the same tool
version (a newer version may compute differently), a plain study (not ``--converge``, which changes the
discretisation), and results format 1 (docs/results-json.md). Anything else is solved again, and the
command says why.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass

from ..case.model import Case
from ..errors import GroundingError
from ..textfile import read_user_text
from ..version import __version__

#: The results format this reader knows (written by ``grounding study --json``).
KNOWN_FORMAT = 1


@dataclass(frozen=True)
class RecordedStudy:
    """A study's results document as read from its JSON file.

    Attributes
    ----------
    path : str
        The results file.
    document : dict
        The whole results document (format 1).
    """

    path: str
    document: dict

    @property
    def case_sha256(self) -> str:
        """SHA-256 of the case file the results are of."""
        return str(self.document.get("case", {}).get("sha256", ""))

    def why_not_reusable(self, case: Case) -> str | None:
        """Why these results cannot stand for a fresh study of ``case`` (None when they can)."""
        doc = self.document
        problem = _shape_problem(doc)
        if problem:
            return f"not a complete results file ({problem})"
        tool = doc["tool"]
        if doc.get("format") != KNOWN_FORMAT:
            return f"results format {doc.get('format')!r}; this version reads format {KNOWN_FORMAT}"
        if tool.get("version") != __version__:
            return f"written by grounding {tool.get('version')}; this is {__version__}, which may compute differently"
        if self.case_sha256 != case.sha256:
            return f"of a case with SHA-256 {self.case_sha256[:16]}…, not {case.source} ({case.sha256[:16]}…)"
        recorded = {(i.get("kind"), i.get("sha256")) for i in doc.get("case", {}).get("inputs", [])}
        for kind, path, sha in case.input_files():
            if (kind, sha) not in recorded:
                return f"the {kind} file {path} has changed since (or was not recorded)"
        if (doc.get("diagnostics") or {}).get("convergence") is not None:
            return "studied with --converge (a finer discretisation than the other options')"
        return None


#: Kinds of the values an option is compared by: finite numbers (None allowed where the study may leave a
#: value out), and true/false verdicts (None where a criterion does not apply).
_NUMBERS = {"grid_resistance_ohm": False, "ground_potential_rise_v": False, "max_touch_voltage_v": True,
            "tolerable_touch_voltage_v": False, "max_step_voltage_v": True, "tolerable_step_voltage_v": True,
            "max_mesh_voltage_v": True}
_VERDICTS = {"touch_ok": False, "step_ok": True, "mesh_ok": True, "separate_electrodes_ok": False, "all_pass": False}


def _shape_problem(doc: dict) -> str | None:
    """What in a results document is missing or of the wrong kind for reuse (None when nothing)."""
    for key in ("tool", "case", "summary", "conductor"):
        if not isinstance(doc.get(key), dict):
            return f"no {key} block"
    if not isinstance(doc["case"].get("sha256"), str) or not isinstance(doc["case"].get("inputs", []), list) \
            or not all(isinstance(i, dict) for i in doc["case"].get("inputs", [])):
        return "case.sha256 or case.inputs is not as written by grounding study"
    for key in ("file", "title"):
        if not isinstance(doc["case"].get(key, ""), str):
            return f"case.{key} is not text"
    s = doc["summary"]
    for key, may_be_null in _NUMBERS.items():
        v = s.get(key, "missing")
        if v is None and may_be_null:
            continue
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            return f"summary.{key} is not a number" if key in s else f"no summary.{key}"
    for key, may_be_null in _VERDICTS.items():
        v = s.get(key, "missing")
        if not (isinstance(v, bool) or (v is None and may_be_null)):
            return f"summary.{key} is not true or false" if key in s else f"no summary.{key}"
    if not isinstance(doc["conductor"].get("ok"), bool):
        return "conductor.ok is not true or false"
    gov = s.get("governing_scenario", {})
    if gov is not None and (not isinstance(gov, dict) or not all(isinstance(v, (str, type(None))) for v in gov.values())):
        return "summary.governing_scenario is not as written by grounding study"
    for key in ("scenarios", "separate_electrodes"):
        if not isinstance(doc.get(key, []), (list, type(None))):
            return f"{key} is not a list"
    if not isinstance(doc.get("diagnostics") or {}, dict):
        return "diagnostics is not a block"
    return None


def read_recorded(path: str) -> RecordedStudy:
    """Read a results JSON file.

    Raises
    ------
    GroundingError
        In one line when the file is missing, unreadable, not JSON or not a study's results.
    """
    text, _ = read_user_text(path, "a results JSON file written by grounding study --json")
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise GroundingError(f"{path}: line {exc.lineno}: not JSON ({exc.msg}); give a file written by "
                             "grounding study --json") from None
    if not isinstance(doc, dict) or not isinstance(doc.get("summary"), dict) or not isinstance(doc.get("case"), dict):
        raise GroundingError(f"{path}: not a study's results (no case and summary blocks); give a file written by "
                             "grounding study --json")
    return RecordedStudy(str(path), doc)


def number(value) -> float:
    """A recorded number (null → NaN)."""
    return math.nan if value is None else float(value)


def match_recorded(cases, records, needs_maps: bool = False) -> tuple[dict[int, RecordedStudy], list[str]]:
    """Which cases a results file stands for, and a note on every results file given.

    Parameters
    ----------
    cases : sequence of Case
        The options being compared.
    records : sequence of RecordedStudy
        The results files given.
    needs_maps : bool
        An output needs each option's surface maps (report, interactive view), which a results file does
        not hold: every case is solved again and the notes say so.

    Returns
    -------
    reused : dict
        Case index → the results that stand for its study.
    notes : list of str
        One line per results file: reused for which case, or why not.
    """
    reused: dict[int, RecordedStudy] = {}
    notes = []
    for rec in records:
        matches = [i for i, c in enumerate(cases) if c.sha256 == rec.case_sha256]
        if not matches:
            notes.append(f"{rec.path}: not reused: its case (SHA-256 {rec.case_sha256[:16]}…) is none of the cases "
                         "compared (a case file changed since?); ignored")
            continue
        for i in matches:
            why = rec.why_not_reusable(cases[i])
            if why is None and needs_maps:
                why = "the report and the interactive view draw each option's maps, which a results file does not hold"
            if why is not None:
                notes.append(f"{rec.path}: not reused for {cases[i].source}: {why}; solved again")
            elif i in reused:
                notes.append(f"{rec.path}: not needed: {reused[i].path} already stands for {cases[i].source}")
            else:
                reused[i] = rec
                notes.append(f"{rec.path}: results of {cases[i].source} reused (same case SHA-256, inputs and "
                             "version); not solved again")
    return reused, notes
