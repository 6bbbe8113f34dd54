"""The case file of a design search's answer, ready to be studied and reported like any other."""

from __future__ import annotations

import copy
import os
from pathlib import Path

import yaml

from ..case_loader import Variant


def design_case_yaml(variant: Variant, source: str, out: str) -> bytes:
    """YAML bytes of the chosen option; a readings path is rewritten relative to the new file."""
    data = copy.deepcopy(variant.data)
    soil = data.get("soil")
    if isinstance(soil, dict) and isinstance(soil.get("readings"), str):
        original = Path(source).parent / soil["readings"]
        soil["readings"] = os.path.relpath(original, Path(out).parent)
    data["title"] = variant.case.title
    header = (f"# Written by grounding design from {source}\n"
              f"# Chosen option: {variant.label}\n"
              "# CAUTION: preliminary study aid; results must be reviewed by a licensed professional engineer.\n")
    return (header + yaml.safe_dump(data, sort_keys=False, allow_unicode=True)).encode("utf-8")
