"""Every option of a case's ``sweep`` block as a validated case."""

from __future__ import annotations

import copy
import hashlib
import itertools
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

from ..case.document import Document
from ..case.load import CaseReader
from ..case.model import Case
from ..case.sweep import apply_setting, setting_order, sweep_settings
from ..errors import CaseError
from ..textfile import read_user_text


@dataclass(frozen=True)
class Variant:
    """One option of a sweep: its settings, the validated case and the case document it came from."""

    label: str
    settings: tuple[tuple[str, Any], ...]
    case: Case
    data: dict


def load_variants(path: str | Path) -> list[Variant]:
    """Every combination of a case file's ``sweep`` block, each validated as a case.

    Raises
    ------
    CaseError
        When the case has no sweep block, or an option is not a valid case (the message names it).
    """
    path = Path(path)
    text, sha = read_user_text(path, "a YAML case file")
    doc = Document.parse(text, str(path))
    fits: dict = {}
    base = CaseReader(doc, fits).read(sha)           # validates the file itself, sweep block included
    if "sweep" not in doc.data:
        raise CaseError(str(path), None, "sweep", "is missing; add a sweep block to vary parameters")
    settings = sweep_settings(doc)
    names = [n for n, _ in settings]
    variants = []
    for combo in itertools.product(*[vals for _, vals in settings]):
        label = " · ".join(f"{n}={lab}" for n, (lab, _) in zip(names, combo))
        data = copy.deepcopy(doc.data)
        del data["sweep"]
        for n, (lab, value) in sorted(zip(names, combo), key=lambda t: setting_order(t[0])):
            try:
                apply_setting(data, n, value, f"sweep.{n}")
            except (ValueError, KeyError, TypeError, ArithmeticError) as exc:
                msg = str(exc) if isinstance(exc, ValueError) else f"cannot be applied ({exc})"
                raise CaseError(str(path), doc.line(f"sweep.{n}"), f"sweep.{n}", msg.split(": ", 1)[-1]) from None
        try:
            case = CaseReader(Document(str(path), data, doc.lines), fits).read(
                hashlib.sha256((base.sha256 + label).encode()).hexdigest())
        except CaseError as exc:
            raise CaseError(exc.file, exc.line, exc.path, f"{exc.problem} (in sweep option {label})") from None
        case = replace(case, title=f"{base.title} [{label}]",
                       notes=tuple(n for n in case.notes if not n.startswith("the sweep block")))
        variants.append(Variant(label, tuple((n, v) for n, (_, v) in zip(names, combo)), case, data))
    return variants
