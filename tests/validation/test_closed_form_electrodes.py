"""Method-of-moments resistances against Dwight's closed forms (uniform soil).

Source: H. B. Dwight, "Calculation of resistances to ground", AIEE Transactions 55, 1936 (equation
forms recalled from memory and checked here against their limiting behaviour). Dwight's formulas use
the average-potential method with a uniform leakage current; by Thomson's variational principle the
uniform current gives an upper bound of the true resistance, so the MoM value must lie slightly below
for electrodes with ends (rod, wire) and agree closely for a ring, which has no ends.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.helpers import resistance, ring_conductors

RHO = 100.0


def test_vertical_rod_against_dwight():
    """R = ρ/(2πL) (ln(4L/a) − 1); rod top at the surface."""
    L, a = 3.0, 0.008
    dwight = RHO / (2 * np.pi * L) * (np.log(4 * L / a) - 1)
    mom = resistance(f"rods: [{{top: [0, 0, 0], length: {L}, diameter: {2 * a}}}]\n", 0.25)
    assert 0.0 < (dwight - mom) / dwight < 0.015


def test_horizontal_wire_against_dwight():
    """R = ρ/(4πL)(ln(4L/a) + ln(4L/s) − 2 + s/(2L) − s²/(16L²) + s⁴/(512L⁴)), length 2L, depth s/2."""
    L, a, s = 10.0, 0.005, 1.0
    dwight = RHO / (4 * np.pi * L) * (np.log(4 * L / a) + np.log(4 * L / s) - 2 + s / (2 * L)
                                      - s ** 2 / (16 * L ** 2) + s ** 4 / (512 * L ** 4))
    mom = resistance(f"conductors: [{{start: [0, 0, {s / 2}], end: [{2 * L}, 0, {s / 2}], diameter: {2 * a}}}]\n", 0.5)
    assert 0.0 < (dwight - mom) / dwight < 0.015


def test_buried_ring_against_dwight_sunde():
    """R = ρ/(2π²D) (ln(8D/d) + ln(4D/s)), ring diameter D, wire diameter d, depth s/2
    (Dwight 1936; the same form in Sunde 1949)."""
    D, d, s = 20.0, 0.01, 1.0
    ring = RHO / (2 * np.pi ** 2 * D) * (np.log(8 * D / d) + np.log(4 * D / s))
    mom = resistance(ring_conductors(D, s / 2, d, 96), 1.0)
    assert mom == pytest.approx(ring, rel=0.005)


def test_resistance_scales_with_resistivity():
    el = "grids: [{origin: [0, 0], size: [20, 20], meshes: [2, 2], depth: 0.5, diameter: 0.01}]\n"
    r1 = resistance(el, 1.0, soil="{resistivity: 100}")
    r2 = resistance(el, 1.0, soil="{resistivity: 370}")
    assert r2 / r1 == pytest.approx(3.7, rel=1e-12)
