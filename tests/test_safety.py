"""Safety stage: decrement factor, Dalziel limits and conductor sizing against IEEE Std 80 tables."""

from __future__ import annotations

import math

import pytest

from grounding.materials import MATERIALS
from grounding.safety.conductor import check_conductor, minimum_area_mm2
from grounding.safety.ieee80 import body_current_limit, decrement_factor, tolerable_limits


@pytest.mark.parametrize("x_over_r,df", [(10, 1.026), (20, 1.052), (40, 1.101)])
def test_decrement_factor_against_ieee80_table(x_over_r, df):
    """IEEE Std 80-2013 Table 10, tf = 0.5 s (30 cycles at 60 Hz); values recalled from memory and
    checked by hand from Df = √(1 + Ta/tf (1 − e^(−2tf/Ta)))."""
    assert decrement_factor(x_over_r, 60.0, 0.5) == pytest.approx(df, abs=0.001)


def test_decrement_factor_is_one_without_offset():
    assert decrement_factor(None, 50, 0.1) == 1.0
    assert decrement_factor(0, 50, 0.1) == 1.0


def test_dalziel_body_current():
    """Dalziel's criterion, IEEE Std 80 clause 5: Ib = 0.116/√ts (50 kg), 0.157/√ts (70 kg)."""
    assert body_current_limit(50, 1.0) == pytest.approx(0.116)
    assert body_current_limit(70, 0.25) == pytest.approx(0.314)


def test_no_surface_layer_uses_soil_and_unit_cs():
    lim = tolerable_limits(100.0, None, 1.0)
    assert lim.cs == 1.0 and lim.surface_resistivity == 100.0
    assert lim.touch[70] == pytest.approx((1000 + 150) * 0.157)
    assert lim.step[50] == pytest.approx((1000 + 600) * 0.116)


def test_conductor_area_against_kf_constant():
    """IEEE Std 80 Table 2 (recalled from memory): Kf = 7.00 for annealed soft-drawn copper with
    Tm = 1083 °C and Ta = 40 °C, where A[kcmil] = I[kA] · Kf · √tc and 1 kcmil = 0.5067 mm²."""
    area = minimum_area_mm2(20.0, 0.5, MATERIALS["copper-annealed"], 40.0, 1083.0)
    assert area == pytest.approx(20.0 * 7.00 * math.sqrt(0.5) * 0.5067, rel=0.003)


def test_conductor_check_uses_fusing_temperature_by_default():
    c = check_conductor(25_000, 1.0, MATERIALS["copper-annealed"], 40.0, None, 0.0124)
    assert c.max_temperature == 1083.0
    assert c.actual_area_mm2 == pytest.approx(math.pi * 12.4 ** 2 / 4)
    assert c.ok == (c.actual_area_mm2 >= c.required_area_mm2)
    lower = check_conductor(25_000, 1.0, MATERIALS["copper-annealed"], 40.0, 250.0, 0.0124)
    assert lower.required_area_mm2 > c.required_area_mm2
