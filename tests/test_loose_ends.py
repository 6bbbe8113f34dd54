"""Small things a new user tripped over, one regression test each."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from grounding.case.load import parse_case
from grounding.geometry.segments import segment
from grounding.study.pipeline import run_study
from tests.conftest import case_text


def test_merge_note_gives_the_shared_length():
    """Two grids sharing a 40 m edge: the note said the merged line's whole length (e.g. 90 m)."""
    case = parse_case(case_text("""\
        grids:
          - {origin: [0, 0], size: [50, 40], meshes: [5, 4], depth: 0.5, diameter: 0.01}
          - {origin: [50, 0], size: [40, 40], meshes: [4, 4], depth: 0.5, diameter: 0.01}
        """))
    notes = [w for w in segment(case).warnings if "overlap along a shared line" in w]
    assert notes and all("(40.00 m)" in w for w in notes)


def test_auto_fit_with_few_readings_says_why_one_layer(tmp_path):
    from grounding.sounding.fit import fit_soil
    from grounding.sounding.readings import load_readings

    path = tmp_path / "r.csv"
    path.write_text("spacing,resistance\n1,20\n2,9\n4,4.2\n")
    fit = fit_soil(load_readings(path, "wenner"), "auto")
    assert "requested" not in fit.reason and "too few" in fit.reason


def test_report_says_unresolved_like_the_terminal():
    from grounding.outputs.report.common import plus_minus as _pm

    assert _pm(float("inf")) == "unresolved" and _pm(1.5) == "unresolved" and _pm(0.12) == "±12%"


def test_compare_table_has_one_header_and_a_clean_no_winner(tmp_path):
    from grounding.options.compare import best_option, make_options
    from grounding.outputs.options_outputs import compare_table

    r = run_study(parse_case(case_text("rods: [{top: [0, 0, 0.5], length: 3, diameter: 0.016}]\n",
                                       extra="surface: {resolution: 1.0}\n")), estimate_error=False)
    options = make_options(["a", "b"], [r, r])
    best, reason = best_option(options, "cost")
    text = compare_table(options, best, reason)
    head = [line for line in text.splitlines() if "option 1" in line and "option 2" in line]
    assert len(head) == 1
    assert "No winner: no winner" not in text


def test_profile_axis_label_has_one_unit():
    from grounding.outputs.figures import profile_figure

    r = run_study(parse_case(case_text("rods: [{top: [0, 0, 0.5], length: 3, diameter: 0.016}]\n",
                                       extra="surface: {resolution: 1.0}\n")), estimate_error=False)
    label = profile_figure(r).figure.axes[0].get_xlabel()
    assert label.count("(m)") == 1 and not label.endswith("m (m)")


def test_worst_touch_place_in_words():
    from grounding.outputs.summary_text import study_summary

    r = run_study(parse_case(case_text("""\
        grids: [{origin: [0, 0], size: [20, 20], meshes: [2, 2], depth: 0.5, diameter: 0.01}]
        conductors: [{start: [20, 10, 0.5], end: [30, 10, 0.5], diameter: 0.01}]
        """, extra="surface: {resolution: 0.5}\n")), estimate_error=False)
    text = study_summary(r)
    assert "The worst touch voltage is" in text
    assert "lead-out tip" in text or "outside the grid meshes" in text or "inside a grid mesh" in text


def test_pdf_metadata_date_is_the_study_date():
    import io

    import pypdf

    from grounding.outputs.report import build_report

    r = run_study(parse_case(case_text("rods: [{top: [0, 0, 0.5], length: 3, diameter: 0.016}]\n",
                                       extra="surface: {resolution: 1.0}\n")), estimate_error=False)
    pdf = build_report(r, date="2026-12-02")
    meta = pypdf.PdfReader(io.BytesIO(pdf)).metadata
    assert meta["/CreationDate"].startswith("D:20261202") and meta["/Producer"].startswith("grounding ")
    assert meta["/Author"] == ""
    assert pdf == build_report(r, date="2026-12-02")


def test_soil_plot_with_separate_traverses_marks_each(tmp_path):
    from click.testing import CliRunner

    from grounding.cli import main
    from tests.test_cli import ROOT

    out = tmp_path / "t.png"
    res = CliRunner().invoke(main, ["soil", str(ROOT / "cases" / "kestrel-bend-wenner.csv"), "--traverses", "separate",
                                    "--plot", str(out)])
    assert res.exit_code == 0, res.output
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


DESIGN_INPUT = """\
# A small yard (invented for this test).
format: 1
title: small yard
soil:
  layers:
    - {resistivity: 200, thickness: 2.0}   # topsoil, ohm·m and m
    - {resistivity: 80}                    # clay
surface_layer:
  resistivity: 3000           # crushed rock, ohm·m
  thickness: 0.15             # m
fault: {current: 1500, split_factor: 0.5, clearing_time: 0.5}
electrodes:
  grids:
    - {origin: [0, 0], size: [20, 20], meshes: [2, 2], depth: 0.5, diameter: 0.01}
discretization: {max_segment: 2.0}
surface: {margin: 2, resolution: 1.0}
sweep:
  grid.spacing: [10, 5]
  rods.layout: [none, perimeter]
"""


def test_design_keeps_the_inputs_comments_and_flow_style(tmp_path):
    """Loose end: `design` dropped the input's comments and layout. The chosen case is the input with the
    sweep block removed and the chosen settings applied; untouched lines are kept as written."""
    from click.testing import CliRunner

    from grounding import load_case
    from grounding.cli import main

    demo = tmp_path / "yard.yaml"
    demo.write_text(DESIGN_INPUT)
    out = tmp_path / "chosen.yaml"
    res = CliRunner().invoke(main, ["design", str(demo), "--out", str(out), "--quiet"])
    assert res.exit_code == 0, res.output
    written = out.read_text()
    # unchanged lines keep their comments and flow style, byte for byte
    for line in ("    - {resistivity: 200, thickness: 2.0}   # topsoil, ohm·m and m",
                 "  resistivity: 3000           # crushed rock, ohm·m",
                 "# A small yard (invented for this test)."):
        assert line in written
    assert "sweep:" not in written
    case = load_case(out)
    assert "[" in case.title                                           # the chosen option is named
    if "perimeter" in case.title:                                      # the search's own entries: flow style
        assert "    - {top: [" in written


def test_refusals_are_one_line_unless_verbose(tmp_path):
    """A refusal is one line; `grounding --verbose` adds the numbered lines of the file around it."""
    import subprocess
    import sys

    path = tmp_path / "bad.yaml"
    path.write_text("format: 1\nsoil: {resistivity: 100}\nfault: {current: 1000, clearing_time: 0.5}\n"
                    "electrodes:\n  rods: [{top: [0, 0, 0], length: -3, diameter: 0.016}]\n")
    plain = subprocess.run([sys.executable, "-m", "grounding.cli", "check", str(path)], capture_output=True, text=True)
    assert plain.returncode == 2
    assert plain.stderr.strip().splitlines() == [f"error: {path}:5: electrodes.rods[0].length must be > 0 m, got -3"]
    verbose = subprocess.run([sys.executable, "-m", "grounding.cli", "--verbose", "check", str(path)],
                             capture_output=True, text=True)
    assert verbose.returncode == 2
    lines = verbose.stderr.strip().splitlines()
    assert lines[0] == plain.stderr.strip() and len(lines) == 4
    assert lines[-1].lstrip().startswith(">") and "length: -3" in lines[-1]


def test_report_plan_is_a_vector_drawing_at_its_stated_scale():
    """The plan in the report is drawn at a standard scale 1:n: a 60 m grid side is 60 000 / n mm on paper."""
    from reportlab.graphics.shapes import Line
    from reportlab.lib.units import mm

    from grounding import load_case, run_study
    from grounding.outputs.plan_vector import SCALES, plan_drawing

    root = Path(__file__).resolve().parents[1]
    case = load_case(root / "cases" / "kestrel-bend-uniform.yaml")
    from dataclasses import replace
    r = run_study(replace(case, discretization=replace(case.discretization, max_segment=4.0),
                          surface=replace(case.surface, resolution=3.0)), estimate_error=False, screen_drop=False)
    drawing, n = plan_drawing(r, 165 * mm, 185 * mm)
    assert n in SCALES and drawing.width <= 165 * mm
    lines = [x for x in drawing.contents if isinstance(x, Line) and abs(x.y1 - x.y2) < 1e-9 and x.strokeWidth == 1.0]
    longest = max(abs(x.x2 - x.x1) for x in lines)
    assert longest == pytest.approx(60.0 * 1000 / n * mm, rel=1e-9)      # the grid's 60 m side
    assert n == 500                                                       # 68 m of metal fit 165 mm at 1:500


LARGE_YARD = """\
    grids:
      - {origin: [0, 0], size: [150, 120], meshes: [10, 8], depth: 0.7, diameter: 0.0134}
    conductors:
      - {start: [150, 60, 0.7], end: [175, 60, 0.7], diameter: 0.0134}
    rods:
      - {top: [0, 0, 0.7], length: 6, diameter: 0.016}
      - {top: [75, 0, 0.7], length: 6, diameter: 0.016}
      - {top: [150, 120, 0.7], length: 6, diameter: 0.016}
    """
LARGE_YARD_EXTRA = """\
    separate_electrodes:
      - name: fence
        connection: floating
        conductors:
          - {start: [-3, -3, 0.3], end: [153, -3, 0.3], diameter: 0.01}
          - {start: [153, -3, 0.3], end: [153, 123, 0.3], diameter: 0.01}
    discretization: {max_segment: 6.0}
    surface: {margin: 5, resolution: 5.0}
    """


@pytest.fixture(scope="module")
def large_yard():
    return run_study(parse_case(case_text(LARGE_YARD, extra=LARGE_YARD_EXTRA)), estimate_error=False)


def test_plan_mesh_label_crosses_no_conductor_on_a_large_yard(large_yard):
    """On a 150 × 120 m yard the mesh label ran across the grid's edge conductor and a corner rod; it is now a
    dimension under the plan, clear of all metal (checked in display coordinates)."""
    from matplotlib.transforms import Bbox

    from grounding.outputs.figures import plan_figure

    fig = plan_figure(large_yard).figure
    ax = fig.axes[0]
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    labels = [t for t in ax.texts if t.get_text().startswith("mesh")]
    assert len(labels) == 1 and labels[0].get_text() == "mesh 15.0 × 15.0 m"
    box = labels[0].get_window_extent(renderer)
    c = large_yard.segments.conductors
    ends = ax.transData.transform(np.vstack([c.start[:, :2], c.end[:, :2]]))
    n = len(c.start)
    for a, b in zip(ends[:n], ends[n:]):
        # sample each conductor finely in display space: no point inside the label's box
        pts = a + np.linspace(0, 1, 400)[:, None] * (b - a)
        assert not box.count_contains(pts), (a, b)
    assert Bbox.intersection(box, ax.bbox) is not None          # and the label is on the plot


def test_leakage_figure_colours_the_energised_system_only(large_yard):
    """A floating fence 3 m outside the grid, drawn in the same colours, hid the grid's edge conductors (the
    end effect the figure is for); separate metal is now thin grey underneath."""
    from matplotlib.collections import LineCollection

    from grounding.outputs.figures import leakage_figure

    ax = leakage_figure(large_yard).figure.axes[0]
    coloured = [lc for lc in ax.collections if isinstance(lc, LineCollection) and lc.get_array() is not None]
    s = large_yard.segments
    main_lines = int((~s.is_rod & (s.group == 0)).sum())
    assert len(coloured) == 1 and len(coloured[0].get_segments()) == main_lines
    grey = [lc for lc in ax.collections if isinstance(lc, LineCollection) and lc.get_array() is None]
    assert len(grey) == 1 and len(grey[0].get_segments()) == int((s.group != 0).sum())


def test_combined_fit_figure_marks_each_traverse():
    """The report's sounding plot drew all traverses of a combined fit alike; a reviewer could not see
    whether they agree. Each traverse now has its own marker and legend entry."""
    from grounding.outputs.soil_outputs import fit_figure
    from grounding.sounding.fit import fit_soil
    from grounding.sounding.readings import load_readings
    from tests.test_cli import ROOT

    r = load_readings(ROOT / "cases" / "kestrel-bend-wenner.csv")
    names = list(dict.fromkeys(r.traverse))
    assert len(names) >= 2
    ax = fit_figure(fit_soil(r, 1)).axes[0]
    labels = [line.get_label() for line in ax.lines]
    assert [f"readings, traverse {n}" for n in names] == [x for x in labels if x.startswith("readings")]
    markers = {line.get_marker() for line in ax.lines if line.get_label().startswith("readings")}
    assert len(markers) == len(names)
