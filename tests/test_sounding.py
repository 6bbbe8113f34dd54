"""Soundings: forward model, readings files, fitting and the soil command."""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner

from grounding.cli import main
from grounding.errors import CaseError
from grounding.sounding.fit import fit_soil
from grounding.sounding.forward import schlumberger, schlumberger_geometric_factor, wenner, wenner_geometric_factor
from grounding.sounding.readings import parse_readings, readings_from_arrays

A = np.geomspace(0.5, 150, 16)


def test_uniform_earth_gives_its_resistivity():
    assert np.allclose(wenner(A, [230.0], []), 230.0, rtol=1e-5)
    assert np.allclose(schlumberger(A * 2, A / 5, [230.0], []), 230.0, rtol=1e-5)


def test_wenner_two_layer_against_tagg_series():
    """Tagg (Earth Resistances, 1964): ρa = ρ1 [1 + 4 Σ K^n (1/√(1 + (2nh/a)²) − 1/√(4 + (2nh/a)²))]."""
    rho1, rho2, h = 300.0, 60.0, 4.0
    k = (rho2 - rho1) / (rho2 + rho1)
    n = np.arange(1, 4000)[None, :]
    x = 2 * n * h / A[:, None]
    tagg = rho1 * (1 + 4 * np.sum(k ** n * (1 / np.sqrt(1 + x ** 2) - 1 / np.sqrt(4 + x ** 2)), axis=1))
    assert np.allclose(wenner(A, [rho1, rho2], [h]), tagg, rtol=2e-6)


def test_schlumberger_two_layer_against_image_series_and_limits():
    """Surface potential of a point source on two layers, V = ρ1 I/(2π) [1/r + 2 Σ K^n / √(r² + (2nh)²)]
    (image series, Tagg 1964), in the Schlumberger formula; and the limits ρa → ρ1 for AB/2 ≪ h and
    ρa → ρ2 for AB/2 ≫ h."""
    rho1, rho2, h = 80.0, 900.0, 3.0
    k = (rho2 - rho1) / (rho2 + rho1)
    n = np.arange(1, 20000)[None, :]
    F = lambda r: rho1 / r * (1 + 2 * np.sum(k ** n / np.sqrt(1 + (2 * n * h / r[:, None]) ** 2), axis=1))  # noqa
    L, l = A * 2, A / 5
    ref = (L * L - l * l) / (2 * l) * (F(L - l) - F(L + l))
    assert np.allclose(schlumberger(L, l, [rho1, rho2], [h]), ref, rtol=1e-5)
    assert schlumberger(np.array([0.05]), np.array([0.01]), [rho1, rho2], [h])[0] == pytest.approx(rho1, rel=1e-3)
    assert schlumberger(np.array([3e4]), np.array([100.0]), [rho1, rho2], [h])[0] == pytest.approx(rho2, rel=2e-3)


def test_wenner_probe_depth_factor():
    """IEEE Std 81: ρa = 4πaR / (1 + 2a/√(a² + 4b²) − a/√(a² + b²)); → 2πaR for b ≪ a, → 4πaR for b ≫ a."""
    assert wenner_geometric_factor(10.0, 1e-6) == pytest.approx(2 * np.pi * 10.0, rel=1e-9)
    assert wenner_geometric_factor(1.0, 1e4) == pytest.approx(4 * np.pi, rel=1e-4)
    # hand calculation for a = 2 m, b = 0.5 m: 1 + 4/√5 − 2/√4.25
    assert wenner_geometric_factor(2.0, 0.5) == pytest.approx(8 * np.pi / (1 + 4 / np.sqrt(5) - 2 / np.sqrt(4.25)))
    assert schlumberger_geometric_factor(10.0, 1.0) == pytest.approx(np.pi * 99 / 2)


def synthetic(rho, h, seed, noise=0.03):
    rng = np.random.default_rng(seed)
    return wenner(A, rho, h) * np.exp(rng.normal(0.0, noise, len(A)))


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("rho,h", [([250.0], []), ([300.0, 60.0], [3.0]), ([400.0, 50.0, 1000.0], [2.0, 8.0])])
def test_fit_recovers_synthetic_models(rho, h, seed):
    """Synthetic soundings (3 % log-normal noise, fixed seeds): the recommended layer count is right and
    no parameter is off by more than 4 of its stated standard deviations (a gross-error check; the
    calibration of the uncertainty itself is tested below)."""
    fit = fit_soil(readings_from_arrays("wenner", A, synthetic(rho, h, seed)))
    assert fit.recommended == len(rho)
    best = fit.best
    for layer, true_rho in zip(best.layers, rho):
        assert abs(np.log(layer.resistivity / true_rho)) <= 4 * np.log1p(layer.resistivity_uncertainty)
    for layer, true_h in zip(best.layers, h):
        assert abs(np.log(layer.thickness / true_h)) <= 4 * np.log1p(layer.thickness_uncertainty)


def test_stated_uncertainty_is_calibrated():
    """Over 30 synthetic two-layer soundings with 3 % noise, the truth lies within two stated standard
    deviations for at least 85 % of the parameters (95 % for a Gaussian estimate, about 93 % with the
    13 degrees of freedom a 16-reading, 3-parameter fit has; measured here: 93 %)."""
    inside = []
    for seed in range(100, 130):
        b = fit_soil(readings_from_arrays("wenner", A, synthetic([300.0, 60.0], [3.0], seed)), 2).best
        for est, true, unc in ((b.layers[0].resistivity, 300.0, b.layers[0].resistivity_uncertainty),
                               (b.layers[0].thickness, 3.0, b.layers[0].thickness_uncertainty),
                               (b.layers[1].resistivity, 60.0, b.layers[1].resistivity_uncertainty)):
            inside.append(abs(np.log(est / true)) <= 2 * np.log1p(unc))
    assert np.mean(inside) >= 0.85


def test_fit_down_weights_bad_readings():
    rho = synthetic([300.0, 60.0], [3.0], 4)
    rho[5] *= 1.6
    rho[11] *= 0.6
    fit = fit_soil(readings_from_arrays("wenner", A, rho))
    assert fit.recommended == 2
    assert set(np.flatnonzero(fit.best.down_weighted)) == {5, 11}
    assert fit.best.layers[0].resistivity == pytest.approx(300.0, rel=0.05)


def test_fewer_readings_than_parameters_refused():
    with pytest.raises(CaseError, match="needs at least"):
        fit_soil(readings_from_arrays("wenner", A[:3], wenner(A[:3], [100.0, 50.0], [2.0])), 2)


CSV = "# invented test sounding\nspacing,resistance,probe_depth\n1,30,0.1\n2,14,0.1\n4,6.5,0.1\n"


def test_readings_conversion_named():
    r = parse_readings(CSV, "r.csv")
    assert r.array == "wenner" and len(r) == 3
    assert "probe depth" in r.conversion
    assert r.apparent_resistivity[0] == pytest.approx(30 * wenner_geometric_factor(1.0, 0.1))
    r2 = parse_readings("spacing,resistance\n1,30\n", "r.csv")
    assert r2.apparent_resistivity[0] == pytest.approx(2 * np.pi * 30) and "2π a R" in r2.conversion


@pytest.mark.parametrize("text,expected", [
    ("spacing,resistance\n1,abc\n", "r.csv:2: column 'resistance' must be a number, got 'abc'"),
    ("spacing,resistance\n1,30\n-2,5\n", "r.csv:3: column 'spacing' must be > 0, got -2"),
    ("spacing,ohms\n1,30\n", "r.csv:1: column 'ohms' is not a known column"),
    ("resistance\n30\n", "r.csv:1: header needs a 'spacing' column"),
    ("spacing\n1\n", "r.csv:1: header needs exactly one of the columns 'resistance'"),
    ("current_half_spacing,potential_half_spacing,resistance\n1,2,30\n",
     "r.csv:2: column 'potential_half_spacing' must be smaller than current_half_spacing"),
    ("spacing,resistance\n1,30,4\n", "r.csv:2: row has 3 values for 2 columns"),
])
def test_readings_errors_name_row_and_column(text, expected):
    with pytest.raises(CaseError) as info:
        parse_readings(text, "r.csv")
    assert str(info.value).startswith(expected)


def test_repeated_spacing_with_different_values_flagged():
    r = parse_readings("spacing,apparent_resistivity\n1,100\n2,90\n2,300\n4,80\n", "r.csv")
    assert len(r.notes) == 1 and "line 3" in r.notes[0] and "line 4" in r.notes[0]


def test_soil_command_json_and_plot(tmp_path):
    rho = synthetic([300.0, 60.0], [3.0], 5)
    path = tmp_path / "s.csv"
    path.write_text("spacing,apparent_resistivity\n" + "".join(f"{a:g},{p:.5g}\n" for a, p in zip(A, rho)))
    res = CliRunner().invoke(main, ["soil", str(path), "--json", str(tmp_path / "s.json"),
                                    "--plot", str(tmp_path / "s.png")])
    assert res.exit_code == 0, res.output
    doc = json.loads((tmp_path / "s.json").read_text())
    assert doc["recommended"]["layers"][0].keys() == {"resistivity", "thickness"}
    assert "thickness" not in doc["recommended"]["layers"][-1]
    assert [m["layer_count"] for m in doc["models"]] == [1, 2, 3]
    assert {"layers", "rms_misfit_percent", "uncertainty_percent"} <= set(doc["models"][1])
    assert len(doc["readings"]) == len(A) and "down_weighted" in doc["readings"][0]
    assert (tmp_path / "s.png").read_bytes()[:4] == b"\x89PNG"
    assert "licensed professional engineer" in res.output


def test_soil_command_bad_file_exit_2(tmp_path):
    path = tmp_path / "s.csv"
    path.write_text("spacing,resistance\n1,x\n")
    res = CliRunner().invoke(main, ["soil", str(path)])
    assert res.exit_code == 2 and "column 'resistance' must be a number" in res.output


def test_case_with_readings_fits_at_load_time(tmp_path):
    """A case naming a readings file gets the fitted model; the study JSON records the fit."""
    from grounding.case.load import load_case
    from grounding.outputs.results_json import results_dict
    from grounding.study.pipeline import run_study

    rho = synthetic([300.0, 60.0], [3.0], 6)
    (tmp_path / "site.csv").write_text("spacing,apparent_resistivity\n" +
                                       "".join(f"{a:g},{p:.5g}\n" for a, p in zip(A, rho)))
    (tmp_path / "case.yaml").write_text(
        "format: 1\nsoil: {readings: site.csv, array: wenner, layers: auto}\n"
        "fault: {current: 2000, clearing_time: 0.5}\n"
        "electrodes:\n  grids: [{origin: [0, 0], size: [10, 10], meshes: [2, 2], depth: 0.5, diameter: 0.01}]\n"
        "surface: {resolution: 1.0}\n")
    case = load_case(tmp_path / "case.yaml")
    assert len(case.soil.layers) == 2
    assert case.soil.layers[0].resistivity == pytest.approx(300.0, rel=0.05)
    doc = results_dict(run_study(case, estimate_error=False))
    fit = doc["soil"]["fit"]
    assert fit["recommended"]["layer_count"] == 2
    assert fit["sha256"] == case.soil_fit.readings.sha256
    assert fit["models"][1]["rms_misfit_percent"] < 10


def test_case_with_missing_readings_file(tmp_path):
    from grounding.case.load import load_case

    (tmp_path / "case.yaml").write_text(
        "format: 1\nsoil: {readings: nope.csv}\nfault: {current: 2000, clearing_time: 0.5}\n"
        "electrodes:\n  rods: [{top: [0, 0, 0], length: 3, diameter: 0.016}]\n")
    with pytest.raises(CaseError, match=r"case.yaml:2: soil.readings file .* not found"):
        load_case(tmp_path / "case.yaml")


def test_repeated_column_refused():
    """Regression (fuzzing): a repeated column silently mispaired readings with --traverses separate."""
    from grounding.errors import CaseError
    from grounding.sounding.readings import parse_readings

    with pytest.raises(CaseError, match="appears twice in the header"):
        parse_readings("traverse,spacing,resistance,traverse\neast,1,20,north\neast,2,9,north\n", "r.csv")


def test_absurd_reading_is_refused_in_one_line_without_warnings(tmp_path):
    """A reading of 1.7e308 Ω (fuzz finding) overflowed the fit with warnings on stderr; now one line, exit 2."""
    import subprocess
    import sys
    from pathlib import Path
    src = (Path(__file__).resolve().parents[1] / "cases" / "kestrel-bend-wenner.csv").read_text().splitlines()
    head = [i for i, line in enumerate(src) if line.startswith("east,")][1]
    parts = src[head].split(",")
    parts[2] = "1.7e308"
    src[head] = ",".join(parts)
    path = tmp_path / "w.csv"
    path.write_text("\n".join(src) + "\n")
    run = subprocess.run([sys.executable, "-m", "grounding.cli", "soil", str(path)], capture_output=True, text=True)
    assert run.returncode == 2 and len(run.stderr.strip().splitlines()) == 1, run.stderr
    assert "beyond the 1e+07 Ω·m" in run.stderr and "Warning" not in run.stderr
