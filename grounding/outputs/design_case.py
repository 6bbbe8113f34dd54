"""The case file of a design search's answer, ready to be studied and reported like any other.

The input file is re-read with ruamel.yaml's round-trip loader and only the swept keys change, so the
engineer's comments, key order and flow style survive in the parts the search did not touch.
"""

from __future__ import annotations

import io
import os
from pathlib import Path

from ruamel.yaml import YAML
from ruamel.yaml.comments import CommentedMap, CommentedSeq
from ruamel.yaml.util import load_yaml_guess_indent

from ..case.sweep import apply_setting, setting_order
from ..options.sweep import Variant
from ..textfile import read_user_text


def design_case_yaml(variant: Variant, source: str, out: str) -> bytes:
    """YAML bytes of the chosen option: the input file with the sweep block removed and the chosen
    settings applied; a readings path is rewritten relative to the new file."""
    text, _ = read_user_text(Path(source), "a YAML case file")
    _, indent, sequence_indent = load_yaml_guess_indent(text)
    yaml = YAML(typ="rt")
    yaml.preserve_quotes = True
    yaml.width = 4096
    indent, offset = indent or 2, sequence_indent or 0          # as the file writes them: "- " after `offset`
    yaml.indent(mapping=max(2, indent - offset), sequence=indent, offset=offset)
    data = yaml.load(text)
    data.pop("sweep", None)
    for name, value in sorted(variant.settings, key=lambda t: setting_order(t[0])):
        apply_setting(data, name, value, f"sweep.{name}")
    data = _flow_new_items(data)
    soil = data.get("soil")
    if isinstance(soil, dict) and isinstance(soil.get("readings"), str):
        original = Path(source).parent / soil["readings"]
        soil["readings"] = os.path.relpath(original, Path(out).parent)
    if "title" in data:
        data["title"] = variant.case.title
    else:
        data.insert(1 if "format" in data else 0, "title", variant.case.title)
    header = (f"# Written by grounding design from {source}\n"
              f"# Chosen option: {variant.label}\n"
              "# CAUTION: preliminary study aid; results must be reviewed by a licensed professional engineer.\n")
    stream = io.StringIO()
    yaml.dump(data, stream)
    return (header + stream.getvalue()).encode("utf-8")


def _flow_new_items(node, inside_list: bool = False):
    """Entries the search added (plain dicts and lists, e.g. a perimeter rod layout) written one per line
    in flow style, as the demo files write rods; what came from the file keeps its own style."""
    if isinstance(node, CommentedMap):
        for k in list(node.keys()):
            node[k] = _flow_new_items(node[k])
        return node
    if isinstance(node, CommentedSeq):
        for i in range(len(node)):
            node[i] = _flow_new_items(node[i], inside_list=True)
        return node
    if isinstance(node, dict):
        out = CommentedMap((k, _flow_new_items(v, True)) for k, v in node.items())
        if inside_list:
            out.fa.set_flow_style()
        return out
    if isinstance(node, list):
        out = CommentedSeq(_flow_new_items(v, True) for v in node)
        if inside_list or all(isinstance(v, (int, float)) for v in node):
            out.fa.set_flow_style()
        return out
    return node
