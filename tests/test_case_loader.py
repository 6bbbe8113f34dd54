"""Case stage: validation of case files, one test per bad-input rule, asserting the message."""

from __future__ import annotations

import pytest

from grounding.case.load import load_case, parse_case
from grounding.errors import CaseError
from tests.conftest import case_text

ROD = "rods: [{top: [0, 0, 0.5], length: 3, diameter: 0.016}]\n"


def error_of(text: str) -> str:
    with pytest.raises(CaseError) as info:
        parse_case(text, file="case.yaml")
    return str(info.value)


def test_valid_case_reads_all_sections():
    text = case_text(ROD, soil="{layers: [{resistivity: 300, thickness: 4}, {resistivity: 60}]}",
                     extra="surface_layer: {resistivity: 2500, thickness: 0.1}\nprobes: [[1, 2]]\n",
                     fault="{current: 8000, split_factor: 0.6, x_over_r: 12, frequency: 60, clearing_time: 0.4}")
    case = parse_case(text)
    assert case.soil.layers[0].resistivity == 300 and case.soil.layers[1].thickness is None
    assert case.soil.interface_depths == (4.0,)
    assert case.fault.shock_duration == 0.4          # defaults to the clearing time
    assert case.fault.frequency == 60 and case.fault.x_over_r == 12
    assert case.surface_layer.thickness == 0.1
    assert case.probes == ((1.0, 2.0),)
    assert case.electrodes.rods[0].length == 3.0
    assert len(case.sha256) == 64


def test_rod_with_negative_length_names_line_and_path():
    text = case_text("rods:\n  - {top: [0, 0, 0.5], length: 3, diameter: 0.016}\n"
                     "  - {top: [1, 0, 0.5], length: 3, diameter: 0.016}\n"
                     "  - {top: [2, 0, 0.5], length: -3, diameter: 0.016}\n")
    line = text.splitlines().index("    - {top: [2, 0, 0.5], length: -3, diameter: 0.016}") + 1
    assert error_of(text) == f"case.yaml:{line}: electrodes.rods[2].length must be > 0 m, got -3"


def test_unknown_key_suggests_nearest():
    msg = error_of(case_text("rodz: []\n" + ROD))
    assert "electrodes.rodz is not a known key; did you mean 'rods'?" in msg


def test_unknown_top_level_key():
    msg = error_of(case_text(ROD, extra="discretisation: {max_segment: 1}\n"))
    assert "discretisation is not a known key; did you mean 'discretization'?" in msg


def test_conductor_above_ground_refused():
    msg = error_of(case_text("conductors: [{start: [0, 0, 0.5], end: [5, 0, -0.2], diameter: 0.01}]\n"))
    assert "electrodes.conductors[0].end[2] depth must be > 0 m" in msg
    assert "above ground" in msg


def test_zero_length_conductor_refused():
    msg = error_of(case_text("conductors: [{start: [1, 1, 0.5], end: [1, 1, 0.5], diameter: 0.01}]\n"))
    assert "electrodes.conductors[0] has zero length" in msg


def test_negative_resistivity_refused():
    assert "soil.resistivity must be > 0 Ω·m, got -50" in error_of(case_text(ROD, soil="{resistivity: -50}"))


def test_zero_resistivity_in_layer_refused():
    msg = error_of(case_text(ROD, soil="{layers: [{resistivity: 0, thickness: 2}, {resistivity: 60}]}"))
    assert "soil.layers[0].resistivity must be > 0 Ω·m, got 0" in msg


def test_zero_thickness_refused():
    msg = error_of(case_text(ROD, soil="{layers: [{resistivity: 100, thickness: 0}, {resistivity: 60}]}"))
    assert "soil.layers[0].thickness must be > 0 m, got 0" in msg


def test_bottom_layer_thickness_refused():
    msg = error_of(case_text(ROD, soil="{layers: [{resistivity: 100, thickness: 2}, {resistivity: 60, thickness: 3}]}"))
    assert "soil.layers[1].thickness must be left out" in msg


def test_no_electrodes_refused():
    msg = error_of(case_text("grids: []\n"))
    assert "electrodes has no electrodes" in msg


def test_millimetre_diameter_refused_with_hint():
    msg = error_of(case_text("rods: [{top: [0, 0, 0.5], length: 3, diameter: 16}]\n"))
    assert "electrodes.rods[0].diameter = 16 m looks like millimetres given as metres" in msg
    assert "0.016" in msg


def test_missing_required_key():
    msg = error_of("format: 1\nsoil: {resistivity: 100}\nelectrodes:\n  " + ROD)
    assert "fault is missing; it is required" in msg


def test_wrong_type_reported():
    msg = error_of(case_text(ROD, soil="{resistivity: lots}"))
    assert "soil.resistivity must be a number in Ω·m, got 'lots'" in msg


def test_yaml_syntax_error_has_line():
    msg = error_of("format: 1\nsoil: {resistivity: 100\nfault: x\n")
    assert msg.startswith("case.yaml:") and "YAML syntax error" in msg


def test_body_weight_must_be_50_or_70():
    msg = error_of(case_text(ROD, extra="criteria: {body_weight: 80}\n"))
    assert "criteria.body_weight must be 50 or 70" in msg


def test_shock_duration_outside_dalziel_range():
    msg = error_of(case_text(ROD, fault="{current: 1000, clearing_time: 5}"))
    assert "outside 0.03 s to 3 s" in msg


def test_unknown_material_suggests():
    msg = error_of(case_text("material: copper-anealed\n" + ROD))
    assert "did you mean 'copper-annealed'?" in msg


def test_segment_shorter_than_diameters_refused():
    msg = error_of(case_text(ROD, extra="discretization: {max_segment: 0.02}\n"))
    assert "discretization.max_segment = 0.02 m is shorter than 4 conductor diameters" in msg


def test_missing_file(tmp_path):
    with pytest.raises(CaseError) as info:
        load_case(tmp_path / "nope.yaml")
    assert "file not found" in str(info.value)


def test_self_crossing_touch_area_refused():
    msg = error_of(case_text(ROD, extra="surface: {touch_area: [[0, 0], [10, 10], [10, 0], [0, 10]]}\n"))
    assert "surface.touch_area is not a simple polygon" in msg


def test_absurd_mesh_count_refused_before_geometry():
    """A mesh count that looks like a spacing in mm would make 200 002 grid lines: refused at load, located."""
    msg = error_of(case_text("grids: [{origin: [0, 0], size: [20, 15], meshes: [100000, 100000], depth: 0.6, "
                             "diameter: 0.01}]\n"))
    assert "electrodes.grids[0].meshes[0] must be <= 1,000, got 100,000" in msg


def test_too_many_segments_refused_before_they_are_built():
    """Long conductors cut very finely: the segment count is estimated from the raw numbers first."""
    from grounding.errors import ModelTooLargeError
    from grounding.geometry.segments import segment

    rows = "".join(f"  - {{start: [0, {i}, 0.5], end: [9000, {i}, 0.5], diameter: 0.001}}\n" for i in range(300))
    case = parse_case(case_text("conductors:\n" + rows, extra="discretization: {max_segment: 0.004}\n"))
    with pytest.raises(ModelTooLargeError, match="segments"):
        segment(case)


@pytest.mark.parametrize("text, message", [
    ("{resistivity: 1e39}", "soil.resistivity = 1e+39 Ω·m is outside the accepted range"),
    ("{resistivity: 100000000000000000000000000000000000000000000000000}", "outside the accepted range"),
])
def test_huge_numbers_are_located_refusals(text, message):
    assert message in error_of(case_text(ROD, soil=text))


def test_x_over_r_range():
    assert "fault.x_over_r must be <= 200" in error_of(case_text(ROD, fault="{current: 1000, clearing_time: 0.5, "
                                                                       "x_over_r: 5000}"))


def test_title_must_be_text():
    assert "title must be one line of text" in error_of(case_text(ROD, extra="title2: x\n").replace(
        "title: test", "title: [a, b]").replace("title2: x\n", ""))


def test_alias_bomb_is_refused_at_once_in_one_line(tmp_path):
    """Regression (fuzzing): six nested YAML aliases under a valid key took 155 s (the line index walked every
    expansion) before being refused; aliases are now refused where they are first met."""
    import time

    from grounding.case.load import load_case
    from grounding.errors import CaseError

    text = ("format: 1\nsoil: {resistivity: 100}\nfault: {current: 1000, clearing_time: 0.5}\nelectrodes:\n"
            "  rods: [{top: [0, 0, 0.5], length: 3, diameter: 0.016}]\nx0: &a [[1, 1], [1, 1], [1, 1], [1, 1]]\n")
    for k in range(1, 7):
        text += f"x{k}: &a{k} [" + ", ".join(["*a" if k == 1 else f"*a{k - 1}"] * 10) + "]\n"
    path = tmp_path / "bomb.yaml"
    path.write_text(text + "probes: *a6\n")
    t0 = time.perf_counter()
    with pytest.raises(CaseError) as err:
        load_case(path)
    assert time.perf_counter() - t0 < 2.0
    assert "uses a YAML alias" in str(err.value) and "\n" not in str(err.value) and ":7:" in str(err.value)


def test_oversized_file_is_refused_before_reading(tmp_path):
    """Document size is bounded: a 21 MB file is refused in one line without parsing it."""
    from grounding.case.load import load_case
    from grounding.errors import CaseError
    from grounding.textfile import MAX_TEXT_BYTES

    path = tmp_path / "huge.yaml"
    path.write_text("format: 1\ntitle: " + "x" * (MAX_TEXT_BYTES + 1_000_000) + "\n")
    with pytest.raises(CaseError) as err:
        load_case(path)
    assert "MB" in str(err.value) and "right file" in str(err.value)


@pytest.mark.parametrize("electrodes, message", [
    # regressions (fuzzing): a 10 µm conductor, a 10 µm rod and a 20 µm grid side crashed the geometry
    # ("need at least one array to concatenate"); a 0.5 mm conductor 10 mm thick was "valid"
    ("conductors: [{start: [0, 0, 0.6], end: [0.00001, 0, 0.6], diameter: 0.01}]", "electrodes.conductors[0] is 0.01 mm long"),
    ("rods: [{top: [0, 0, 0.5], length: 0.00001, diameter: 0.016}]", "electrodes.rods[0].length is 0.01 mm long"),
    ("grids: [{origin: [0, 0], size: [0.00002, 10], meshes: [1, 1], depth: 0.5, diameter: 0.01}]",
     "electrodes.grids[0].size[0] the grid side along x is 0.02 mm long"),
    ("grids: [{origin: [0, 0], size: [0.5, 10], meshes: [100, 1], depth: 0.5, diameter: 0.01}]",
     "the mesh spacing along x is 5 mm long, shorter than its diameter"),
    ("conductors: [{start: [0, 0, 0.6], end: [0.0005, 0, 0.6], diameter: 0.01}]", "shorter than its diameter (10 mm)"),
])
def test_electrodes_shorter_than_they_are_thick_are_refused_in_one_line(tmp_path, electrodes, message):
    from tests.conftest import case_text

    path = tmp_path / "short.yaml"
    path.write_text(case_text(electrodes))
    with pytest.raises(CaseError) as err:
        load_case(path)
    assert message in str(err.value) and "\n" not in str(err.value), str(err.value)
