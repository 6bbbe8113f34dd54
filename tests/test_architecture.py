"""The stages import only earlier stages (sounding → case → geometry → soil → … → outputs → cli)."""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parents[1] / "grounding"

#: Stage rank of each top-level module or subpackage; equal ranks may import each other.
RANK = {
    "errors": 0, "cautions": 0, "textfile": 0, "materials": 0,
    "sounding": 1, "case": 2, "case_checks": 2, "case_drawing": 2, "case_electrodes": 2, "case_site": 2, "case_loader": 2, "geometry": 3, "metal_network": 3, "soil": 4, "conductor_impedance": 5, "integrals": 5, "assembly": 6, "hmatrix": 5, "operators": 6,
    "solve": 7, "solve_network": 7, "surface": 8, "safety": 9, "study": 10, "validation": 11, "uncertainty": 11, "options": 12, "outputs": 13,
    "cli": 14, "__init__": 15,
}


def stage_of(module: str) -> str:
    return module.split(".")[0]


def imports_of(path: Path) -> set[str]:
    rel = path.relative_to(PACKAGE).with_suffix("")
    parts = list(rel.parts)
    found = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom) and node.level:
            base = parts[:-node.level] if node.level <= len(parts) else []
            target = ".".join(base + ([node.module] if node.module else []))
            if target:
                found.add(stage_of(target))
            else:                                   # `from .. import x`: x is a module or a root attribute
                found.update(stage_of(a.name) if stage_of(a.name) in RANK else "__init__" for a in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.module.startswith("grounding."):
            found.add(stage_of(node.module[len("grounding."):]))
    return found


def test_no_stage_imports_a_later_stage():
    bad = []
    for path in PACKAGE.rglob("*.py"):
        own = stage_of(".".join(path.relative_to(PACKAGE).with_suffix("").parts))
        for target in imports_of(path):
            if target == "__init__" or target == own:
                continue
            if RANK[target] > RANK[own]:
                bad.append(f"{path.relative_to(PACKAGE)} imports {target}")
    assert not bad, bad


def test_every_module_has_a_rank():
    names = {stage_of(".".join(p.relative_to(PACKAGE).with_suffix("").parts)) for p in PACKAGE.rglob("*.py")}
    assert names <= set(RANK), names - set(RANK)
