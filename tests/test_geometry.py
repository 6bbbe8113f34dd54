"""Geometry stage: segmentation at junctions, crossings, interfaces and max_segment; merging overlaps."""

from __future__ import annotations

import numpy as np
import pytest

from grounding.geometry.segments import segment


def test_grid_cut_at_every_crossing(make_case):
    case = make_case("grids: [{origin: [0, 0], size: [10, 6], meshes: [2, 3], depth: 0.5, diameter: 0.01}]\n"
                     "", extra="discretization: {max_segment: 10}\n")
    s = segment(case)
    # 4 lines along x (cut into 2 by 3 crossings each) and 3 along y (cut into 3): 4*2 + 3*3
    assert len(s) == 4 * 2 + 3 * 3
    assert s.total_length == pytest.approx(4 * 10 + 3 * 6)
    assert np.all(s.length <= 5 + 1e-12)


def test_max_segment_respected_and_lengths_equal_within_piece(make_case):
    case = make_case("conductors: [{start: [0, 0, 0.5], end: [10, 0, 0.5], diameter: 0.01}]\n",
                     extra="discretization: {max_segment: 3}\n")
    s = segment(case)
    assert len(s) == 4
    assert np.allclose(s.length, 2.5)


def test_rod_cut_at_layer_interface(make_case):
    case = make_case("rods: [{top: [0, 0, 0.5], length: 6, diameter: 0.016}]\n",
                     soil="{layers: [{resistivity: 300, thickness: 2.2}, {resistivity: 50}]}",
                     extra="discretization: {max_segment: 10}\n")
    s = segment(case)
    # two pieces (0.5–2.2 m, 2.2–6.5 m), each end refined at a quarter and a half of its length (ROD_END_GRADING)
    assert len(s) == 6 and s.graded == 4 and s.base_count == 2
    assert np.any(np.isclose(s.end[:, 2], 2.2)) and np.any(np.isclose(s.start[:, 2], 2.2))
    assert not np.any((s.start[:, 2] < 2.2 - 1e-9) & (s.end[:, 2] > 2.2 + 1e-9))     # none crosses it
    assert sorted(np.round(s.length, 6)) == sorted(np.round([0.425, 0.425, 0.85, 1.075, 1.075, 2.15], 6))


def test_rod_top_on_conductor_cuts_it(make_case):
    case = make_case("conductors: [{start: [0, 0, 0.5], end: [10, 0, 0.5], diameter: 0.01}]\n"
                     "rods: [{top: [3, 0, 0.5], length: 2, diameter: 0.016}]\n",
                     extra="discretization: {max_segment: 10}\n")
    s = segment(case)
    horizontal = s.length[~s.is_rod]
    assert sorted(horizontal.round(6)) == [3.0, 7.0]


def test_overlapping_collinear_conductors_merged(make_case):
    case = make_case("grids: [{origin: [0, 0], size: [10, 10], meshes: [1, 1], depth: 0.5, diameter: 0.01}]\n"
                     "conductors: [{start: [5, 0, 0.5], end: [15, 0, 0.5], diameter: 0.012}]\n")
    s = segment(case)
    assert s.total_length == pytest.approx(40 + 5)
    assert any("overlap" in w for w in s.warnings)


def test_adjacent_grids_share_their_edge(make_case):
    case = make_case("grids:\n"
                     "  - {origin: [0, 0], size: [10, 10], meshes: [2, 2], depth: 0.5, diameter: 0.01}\n"
                     "  - {origin: [10, 0], size: [10, 10], meshes: [2, 2], depth: 0.5, diameter: 0.01}\n")
    s = segment(case)
    # 2 grids of 60 m each minus the shared 10 m edge
    assert s.total_length == pytest.approx(110)


def test_separate_electrodes_warned_as_bonded(make_case):
    case = make_case("rods:\n  - {top: [0, 0, 0.5], length: 3, diameter: 0.016}\n"
                     "  - {top: [20, 0, 0.5], length: 3, diameter: 0.016}\n")
    s = segment(case)
    assert any("bonded" in w for w in s.warnings)


def test_oblique_crossing_found(make_case):
    case = make_case("conductors:\n  - {start: [0, 0, 0.5], end: [10, 10, 0.5], diameter: 0.01}\n"
                     "  - {start: [0, 10, 0.5], end: [10, 0, 0.5], diameter: 0.01}\n",
                     extra="discretization: {max_segment: 100}\n")
    s = segment(case)
    assert len(s) == 4
    assert np.allclose(s.length, np.sqrt(50))


def test_side_by_side_conductors_closer_than_their_diameters_warned(make_case):
    case = make_case("conductors:\n  - {start: [0, 0, 0.5], end: [10, 0, 0.5], diameter: 0.01}\n"
                     "  - {start: [2, 0.004, 0.5], end: [8, 0.004, 0.5], diameter: 0.01}\n")
    s = segment(case)
    assert any("side by side 4.0 mm apart" in w for w in s.warnings)


def test_ordinary_grid_has_no_proximity_warning(make_case):
    case = make_case("grids: [{origin: [0, 0], size: [10, 10], meshes: [5, 5], depth: 0.5, diameter: 0.01}]\n")
    assert not any("side by side" in w for w in segment(case).warnings)


def test_overshoot_of_a_third_of_a_millimetre_leaves_no_sliver(make_case):
    """A 14 mm conductor that runs 0.33 mm past the one it meets: its end is moved onto the other's axis
    (within the two radii), no piece shorter than 1 mm (or the diameter) is left, and a note says so."""
    case = make_case("conductors:\n"
                     "  - {start: [0, 0, 0.5], end: [10, 0, 0.5], diameter: 0.014}\n"
                     "  - {start: [5, -4, 0.5], end: [5, 0.00033, 0.5], diameter: 0.014}\n",
                     extra="discretization: {max_segment: 1.0}\n")
    s = segment(case)
    assert s.length.min() >= 1e-3
    assert s.total_length == pytest.approx(10 + 4, abs=1e-9)          # the 0.33 mm overshoot is gone
    assert np.isclose(s.end[:, :2], [5.0, 0.0]).all(axis=1).any()     # the branch ends on the axis it meets
    assert any("moved onto it" in w and "0.33 mm" in w for w in s.warnings)
    assert not any("do not touch" in w for w in s.warnings)


def test_post_top_half_a_millimetre_from_the_wire_touches_it(make_case):
    """A fence post whose top lies 0.5 mm below the bottom wire's axis (wire 10 mm, post 50 mm): the metal
    touches, so the fence is one piece (no "do not touch" note) and the post starts on the wire."""
    case = make_case("conductors: [{start: [0, 0, 0.5], end: [10, 0, 0.5], diameter: 0.01}]\n", extra=
                     "separate_electrodes:\n"
                     "  - name: fence\n"
                     "    connection: floating\n"
                     "    conductors: [{start: [-2, -2, 0.3], end: [12, -2, 0.3], diameter: 0.01}]\n"
                     "    rods: [{top: [4, -2, 0.3005], length: 1.0, diameter: 0.05}]\n")
    s = segment(case)
    assert not any("do not touch" in w for w in s.warnings)
    rod = s.is_rod
    assert s.start[rod][:, 2].min() == pytest.approx(0.3, abs=1e-9)


def test_short_pieces_between_close_crossings_merged(make_case):
    """Two conductors crossing a third 0.4 mm apart would cut a 0.4 mm piece out of it: merged (equipotential
    model), with a note; no piece is shorter than 1 mm and no metal is lost."""
    case = make_case("conductors:\n"
                     "  - {start: [0, 0, 0.5], end: [10, 0, 0.5], diameter: 0.01}\n"
                     "  - {start: [5, -3, 0.5], end: [5, 3, 0.5], diameter: 0.01}\n"
                     "  - {start: [5.0004, -3, 0.5], end: [5.0004, 3, 0.5], diameter: 0.0001}\n",
                     extra="discretization: {max_segment: 1.0}\n")
    s = segment(case)
    assert s.length.min() >= 1e-3
    assert s.total_length == pytest.approx(10 + 6 + 6, abs=1e-9)
    assert any("merged into their neighbours" in w for w in s.warnings)
