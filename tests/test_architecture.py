"""The package is a one-way stack of stages that reads as the method, and a module imports only what comes before it.

Stages, earliest first: the shared modules (errors, cautions, materials, user-file reading, version) → sounding →
case → geometry → kernels → operators → solve → surface → safety → study → options → outputs → cli → the
package's face (``grounding/__init__.py``). Inside a stage, its modules are in a fixed order too (no two modules
import each other, directly or round about). Every import form counts: ``from .x import``, ``from .. import x``,
``from . import x``, ``import grounding.x``, ``from grounding.x import`` and imports inside functions.
"""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parents[1] / "grounding"

#: Stages, earliest first. A module may import from its own stage (earlier modules only) and earlier stages.
STAGES = ("shared", "sounding", "case", "geometry", "kernels", "operators", "solve", "surface", "safety", "study",
          "options", "outputs", "cli", "face")

#: The shared modules at the top level, in their order.
SHARED = ("errors", "cautions", "materials", "version", "textfile")

#: The order of the modules inside each stage (a module may import only those before it; the package's
#: ``__init__`` counts as the first module of its stage).
ORDER = {
    "shared": SHARED,
    "sounding": ("__init__", "forward", "readings", "fit"),
    "case": ("__init__", "document", "model", "site", "electrodes", "drawing", "sweep", "load"),
    "geometry": ("__init__", "segments", "network", "plan"),
    "kernels": ("base", "uniform", "two_layer", "layered", "__init__", "integrals", "impedance"),
    "operators": ("__init__", "hmatrix", "assembly", "mutual_resistance", "potential", "inductance"),
    "solve": ("__init__", "equipotential", "network", "policy", "run"),
    "surface": ("__init__", "zoning", "results", "search", "steps", "revisit", "contours", "fields"),
    "safety": ("__init__", "ieee80", "en50522", "conductor", "current_division", "simplified", "site"),
    "study": ("__init__", "result", "metal_drop", "accuracy", "cache", "conditions", "uncertainty", "pipeline", "converge", "validation",
              "fall_of_potential"),
    "options": ("__init__", "quantities", "sweep", "runner", "recorded", "compare", "design"),
    "outputs": ("__init__", "style", "atomic", "surface_csv", "soil_outputs", "results_json", "summary_text",
                "figures", "plan_vector", "drawing_dxf", "html_view", "report", "options_outputs",
                "design_case", "fall_of_potential_outputs"),
    "outputs.report": ("common", "tables", "method", "sections", "build", "__init__"),
    "cli": ("cli",),
    "face": ("__init__",),
}


def module_name(path: Path) -> str:
    """Dotted name inside the package: ``surface.fields``, ``errors``, ``case`` (a package's ``__init__``: the
    package), ``""`` for the package's face."""
    parts = list(path.relative_to(PACKAGE).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def exists(name: str) -> bool:
    p = PACKAGE.joinpath(*name.split(".")) if name else PACKAGE
    return p.with_suffix(".py").is_file() or (p / "__init__.py").is_file()


def place(name: str) -> tuple[str, str]:
    """(stage, module within the stage) of a dotted module name inside the package; for a package nested in a
    stage (``outputs.report``), the nested package is the stage."""
    if name == "":
        return "face", "__init__"
    parts = name.split(".")
    if parts[0] in SHARED:
        return "shared", parts[0]
    if parts[0] == "cli":
        return "cli", "cli"
    if len(parts) > 2 or (len(parts) == 2 and ".".join(parts) in ORDER):
        return ".".join(parts[:2]), parts[2] if len(parts) > 2 else "__init__"
    return parts[0], parts[1] if len(parts) > 1 else "__init__"


def rank(stage: str) -> int:
    """Position of a stage in STAGES (a nested package ranks with its stage)."""
    return STAGES.index(stage.split(".")[0])


def imported_modules(path: Path, source: str | None = None) -> set[str]:
    """Every module of the package that ``path`` (its text, or ``source``) imports, in any form, as dotted names
    inside the package."""
    own = module_name(path)
    package = own.split(".") if path.name == "__init__.py" else own.split(".")[:-1]
    package = [p for p in package if p]
    found: set[str] = set()

    def add(base: list[str], names):
        for alias in names:
            candidate = ".".join(base + [alias.name])
            # `from x import y` imports module x.y when that is a module, else an attribute of x
            found.add(candidate if exists(candidate) else ".".join(base))

    for node in ast.walk(ast.parse(path.read_text() if source is None else source)):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[:len(package) - (node.level - 1)] if node.level > 1 else list(package)
                base = base + (node.module.split(".") if node.module else [])
            elif node.module == "grounding" or (node.module or "").startswith("grounding."):
                base = node.module.split(".")[1:]
            else:
                continue
            add(base, node.names)
        elif isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name == "grounding" or alias.name.startswith("grounding."):
                    found.add(".".join(alias.name.split(".")[1:]))
    found.discard(own)
    return found


def test_every_module_has_a_place_in_the_order():
    missing = []
    for path in PACKAGE.rglob("*.py"):
        stage, sub = place(module_name(path))
        if stage not in ORDER or sub not in ORDER[stage]:
            missing.append(str(path.relative_to(PACKAGE)))
    assert not missing, f"give these modules a place in ORDER: {missing}"


def test_no_module_imports_a_later_stage_or_a_later_module_of_its_stage():
    bad = []
    for path in PACKAGE.rglob("*.py"):
        stage, sub = place(module_name(path))
        for target in imported_modules(path):
            t_stage, t_sub = place(target)
            if rank(t_stage) > rank(stage):
                bad.append(f"{path.relative_to(PACKAGE)} imports the later stage {target or 'grounding'}")
            elif t_stage == stage and ORDER[stage].index(t_sub) >= ORDER[stage].index(sub):
                bad.append(f"{path.relative_to(PACKAGE)} imports {target}, which comes after it in its stage")
            elif t_stage.startswith(stage + ".") and ORDER[stage].index(t_stage.split(".")[1]) >= ORDER[stage].index(sub):
                bad.append(f"{path.relative_to(PACKAGE)} imports {target}, which comes after it in its stage")
            elif stage.startswith(t_stage + ".") and ORDER[t_stage].index(t_sub) >= ORDER[t_stage].index(
                    stage.split(".")[1]):
                bad.append(f"{path.relative_to(PACKAGE)} imports {target}, which comes after its package")
    assert not bad, "\n".join(bad)


def test_the_checker_sees_every_import_form():
    """The rules above apply to each form: a module written with each of them is read correctly."""
    source = ("from .. import errors\nfrom . import results\nfrom ..study.result import StudyResult\n"
              "import grounding.outputs.atomic\nfrom grounding.cli import run\n"
              "def f():\n    from ..options import compare\n")
    found = imported_modules(PACKAGE / "surface" / "probe.py", source)
    assert found == {"errors", "surface.results", "study.result", "outputs.atomic", "cli", "options.compare"}


def test_importing_the_package_changes_no_plotting_backend():
    """Importing any module leaves matplotlib's backend as the user set it (scikit-fem's habit)."""
    import subprocess
    import sys

    code = ("import matplotlib; matplotlib.use('svg'); import pkgutil, importlib, grounding\n"
            "for m in pkgutil.walk_packages(grounding.__path__, 'grounding.'): importlib.import_module(m.name)\n"
            "print(matplotlib.get_backend())")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "svg"
