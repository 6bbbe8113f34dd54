"""DXF drawings in and out (ezdxf, the general-purpose DXF library, as the independent writer/reader)."""

from __future__ import annotations

import subprocess
import sys
import textwrap

import numpy as np
import pytest

ezdxf = pytest.importorskip("ezdxf")

from grounding.case.load import load_case
from grounding.operators.potential import surface_potential
from grounding.study.pipeline import run_study

HEAD = """\
format: 1
title: drawing test
soil: {resistivity: 150}
fault: {current: 3000, clearing_time: 0.5}
discretization: {max_segment: 1.0}
surface: {resolution: 1.0}
"""
YAML_ELECTRODES = """\
electrodes:
  conductors:
    - {start: [0, 0, 0.6], end: [20, 0, 0.6], diameter: 0.012}
    - {start: [20, 0, 0.6], end: [20, 15, 0.6], diameter: 0.012}
    - {start: [20, 15, 0.6], end: [0, 15, 0.6], diameter: 0.012}
    - {start: [0, 15, 0.6], end: [0, 0, 0.6], diameter: 0.012}
    - {start: [10, 0, 0.6], end: [10, 15, 0.6], diameter: 0.012}
  rods:
    - {top: [0, 0, 0.6], length: 3, diameter: 0.016}
    - {top: [20, 15, 0.6], length: 3, diameter: 0.016}
"""


def _drawing(path, scale=1.0, units=6):
    doc = ezdxf.new("R2010")
    doc.header["$INSUNITS"] = units
    for name in ("EARTH", "RODS", "FENCE-TEXT"):
        doc.layers.add(name)
    msp = doc.modelspace()
    msp.add_lwpolyline([(0, 0), (20 * scale, 0), (20 * scale, 15 * scale), (0, 15 * scale)], close=True,
                       dxfattribs={"layer": "EARTH"})
    msp.add_line((10 * scale, 0), (10 * scale, 15 * scale), dxfattribs={"layer": "EARTH"})
    msp.add_point((0, 0), dxfattribs={"layer": "RODS"})
    msp.add_circle((20 * scale, 15 * scale), radius=0.01 * scale, dxfattribs={"layer": "RODS"})
    msp.add_text("gate", dxfattribs={"layer": "FENCE-TEXT"})
    doc.saveas(path)


def _drawing_case(tmp_path, units="m", scale=1.0, code=6, extra=""):
    _drawing(tmp_path / "yard.dxf", scale, code)
    path = tmp_path / "d.yaml"
    path.write_text(HEAD + textwrap.dedent(f"""\
        electrodes:
          drawing: {{file: yard.dxf, conductor_layers: [EARTH], rod_layers: [RODS], depth: 0.6, diameter: 0.012,
                     rod_length: 3, rod_diameter: 0.016, units: {units}{extra}}}
        """))
    return path


def test_drawing_equals_the_same_layout_in_yaml(tmp_path):
    yaml_case = tmp_path / "y.yaml"
    yaml_case.write_text(HEAD + YAML_ELECTRODES)
    a = run_study(load_case(yaml_case), estimate_error=False)
    b = run_study(load_case(_drawing_case(tmp_path)), estimate_error=False)
    assert b.grid_resistance == pytest.approx(a.grid_resistance, rel=1e-12)
    assert any("1 entity on other layers" in n for n in b.case.notes)
    mm = run_study(load_case(_drawing_case(tmp_path, units="mm", scale=1000.0, code=4)), estimate_error=False)
    assert mm.grid_resistance == pytest.approx(a.grid_resistance, rel=1e-12)


@pytest.mark.parametrize("change, message", [
    ("units", "the drawing says its units are m"),
    ("layer", "layer 'GROUND' is not in"),
])
def test_bad_drawings_one_line_exit_2(tmp_path, change, message):
    path = _drawing_case(tmp_path, units="mm" if change == "units" else "m")
    if change == "layer":
        path.write_text(path.read_text().replace("conductor_layers: [EARTH]", "conductor_layers: [GROUND]"))
    run = subprocess.run([sys.executable, "-m", "grounding.cli", "check", str(path)], capture_output=True, text=True)
    assert run.returncode == 2 and len(run.stderr.strip().splitlines()) == 1 and message in run.stderr, run.stderr


def test_arcs_on_a_conductor_layer_are_refused(tmp_path):
    path = _drawing_case(tmp_path)
    doc = ezdxf.readfile(tmp_path / "yard.dxf")
    doc.modelspace().add_arc((5, 5), 2, 0, 90, dxfattribs={"layer": "EARTH"})
    doc.saveas(tmp_path / "yard.dxf")
    run = subprocess.run([sys.executable, "-m", "grounding.cli", "check", str(path)], capture_output=True, text=True)
    assert run.returncode == 2 and "approximate curves by straight chords" in run.stderr


def test_drawing_in_feet_and_lowercase_layer_names_equal_metres(tmp_path):
    """A drawing in feet ($INSUNITS 2) read with units: ft is the same layout (1 ft = 0.3048 m exactly, by
    definition); DXF layer names are case-insensitive, so 'earth' finds layer EARTH."""
    a = run_study(load_case(_drawing_case(tmp_path)), estimate_error=False)
    path = _drawing_case(tmp_path, units="ft", scale=1 / 0.3048, code=2)
    path.write_text(path.read_text().replace("conductor_layers: [EARTH]", "conductor_layers: [earth]"))
    b = run_study(load_case(path), estimate_error=False)
    # the reader is exact to rounding (coordinates 4e-15 m apart) ...
    np.testing.assert_allclose(b.segments.start, a.segments.start, rtol=0, atol=1e-13)
    np.testing.assert_allclose(b.segments.end, a.segments.end, rtol=0, atol=1e-13)
    # ... and Rg moves 3e-6 with that rounding: on a regular grid many segment pairs sit exactly at the
    # distance where the assembly switches quadrature tier, and a 1e-16 change flips them (the same case typed
    # in YAML with those rounded coordinates gives the same Rg to the last digit; measured)
    assert b.grid_resistance == pytest.approx(a.grid_resistance, rel=1e-5)


def _add_and_check(tmp_path, add):
    """Add entities to the test drawing with ``add(modelspace)``; the check's exit code and stderr."""
    path = _drawing_case(tmp_path)
    doc = ezdxf.readfile(tmp_path / "yard.dxf")
    add(doc.modelspace())
    doc.saveas(tmp_path / "yard.dxf")
    run = subprocess.run([sys.executable, "-m", "grounding.cli", "check", str(path)], capture_output=True, text=True)
    return run.returncode, run.stderr


@pytest.mark.parametrize("what, add, message", [
    # regressions from a fuzz campaign of DXF inputs: each was read silently or crashed
    ("bulged polyline", lambda m: m.add_lwpolyline([(0, 0, 0, 0, 0.5), (10, 0, 0, 0, 0), (10, 10, 0, 0, 0)],
                                                   format="xyseb", dxfattribs={"layer": "EARTH"}),
     "with arc segments (bulges)"),
    ("polyface", lambda m: m.add_polyface(dxfattribs={"layer": "EARTH"}).append_face([(0, 0, 0), (5, 0, 0), (5, 5, 0)]),
     "mesh or polyface"),
    ("NaN coordinate", lambda m: m.add_line((float("nan"), 0), (5, 5), dxfattribs={"layer": "EARTH"}),
     "has the coordinate nan"),
    ("NaN rod depth", lambda m: m.add_point((3, 3, float("nan")), dxfattribs={"layer": "RODS"}), "z = nan"),
    ("10 µm line", lambda m: m.add_line((3, 5), (3.00001, 5), dxfattribs={"layer": "EARTH"}),
     "shorter than its diameter"),
])
def test_bad_drawing_entities_refused_in_one_line(tmp_path, what, add, message):
    code, err = _add_and_check(tmp_path, add)
    assert code == 2 and len(err.strip().splitlines()) == 1 and message in err, (what, err)


def test_dxf_out_layers_and_touch_limit_contour(tmp_path):
    """The touch-limit line of the DXF lies where the touch voltage equals the reported limit (away from
    the edge of the touch area, where the touch map stops)."""
    import shapely

    head = HEAD.replace("surface: {resolution: 1.0}", "surface: {resolution: 0.5, contours: [150]}") + \
        "surface_layer: {resistivity: 2500, thickness: 0.1}\n"
    yaml_case = tmp_path / "y.yaml"
    yaml_case.write_text(head + YAML_ELECTRODES)
    probe = run_study(load_case(yaml_case), estimate_error=False)
    current = 3000 * probe.tolerable_touch / (0.7 * probe.touch_check.worst.value)
    yaml_case.write_text(head.replace("current: 3000", f"current: {current:.6g}") + YAML_ELECTRODES)
    out = tmp_path / "o.dxf"
    run = subprocess.run([sys.executable, "-m", "grounding.cli", "study", str(yaml_case), "--quiet", "--dxf", str(out)],
                         capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    doc = ezdxf.readfile(out)
    layers = {e.dxf.layer for e in doc.modelspace()}
    assert {"GRD-CONDUCTORS", "GRD-RODS", "GRD-TOUCH-AREA", "GRD-WORST", "GRD-TOUCH-LIMIT"} <= layers
    r = run_study(load_case(yaml_case), estimate_error=False)
    pts = np.array([p for e in doc.modelspace().query("LWPOLYLINE") if e.dxf.layer == "GRD-TOUCH-LIMIT"
                    for p in e.get_points("xy")])
    inner = r.surface.touch_area.buffer(-1.0)
    pts = pts[shapely.contains_xy(inner, pts[:, 0], pts[:, 1])]
    assert len(pts) > 5
    touch = r.ground_potential_rise - surface_potential(pts, r.segments, r.segment_currents, r.kernel)
    assert np.abs(touch - r.tolerable_touch).max() < 0.03 * r.tolerable_touch     # map interpolation at 0.5 m
