"""Review report, figures and CSV export: content from the real solution, reproducible, atomic."""

from __future__ import annotations

import io

import numpy as np
import pytest
from click.testing import CliRunner
from pypdf import PdfReader

from grounding.case.load import parse_case
from grounding.cautions import CAUTIONS
from grounding.cli import main
from grounding.outputs.figures import all_figures, touch_figure
from grounding.outputs.report import build as report_build
from grounding.outputs.report import build_report
from grounding.outputs.surface_csv import surface_csv
from grounding.study.pipeline import run_study
from tests.test_cli import SMALL


@pytest.fixture(scope="module")
def result():
    return run_study(parse_case(SMALL.replace("title: small yard", "title: small yard\nsite: Testfield"),
                                file="small.yaml"))


@pytest.fixture(scope="module")
def pdf(result):
    return build_report(result, date="2026-12-01")


def text_of(pdf_bytes: bytes) -> str:
    reader = PdfReader(io.BytesIO(pdf_bytes))
    return "\n".join(page.extract_text() for page in reader.pages)


def squash(text: str) -> str:
    return " ".join(text.split())


def test_report_sections_and_numbers(result, pdf):
    text = text_of(pdf)
    flat = squash(text)
    for section in ("1 Inputs", "2 Electrode plan", "3 Results", "4 Surface potentials", "5 Touch and step voltages",
                    "6 Method and assumptions", "6.1 Validation", "7 Review", "Reviewer name", "Licence number"):
        assert section in flat, section
    assert f"{result.grid_resistance:.4f} Ω" in flat
    gpr = result.ground_potential_rise
    assert (f"{gpr:,.0f} V" if gpr < 10_000 else f"{gpr / 1000:,.2f} kV") in flat
    assert f"{result.tolerable_touch:,.0f} V" in flat and f"{result.tolerable_step:,.0f} V" in flat
    assert ("PASS" in flat) and (("FAIL" in flat) == (not (result.touch_ok and result.step_ok and result.mesh_ok)))
    assert result.case.sha256 in flat.replace(" ", "") or result.case.sha256 in text.replace("\n", "")
    assert "Testfield" in flat
    assert squash(CAUTIONS[1]) in flat


def test_every_page_carries_the_caution(pdf):
    for page in PdfReader(io.BytesIO(pdf)).pages:
        assert "licensed professional engineer" in squash(page.extract_text())


def test_report_is_reproducible(result, pdf):
    assert build_report(result, date="2026-12-01") == pdf


def test_touch_figure_shows_the_summary_maximum(result):
    fig = touch_figure(result)
    assert fig.shown_max == result.surface.max_touch.value
    # the filled contours are drawn from the touch map itself
    ax = fig.figure.axes[0]
    assert ax.get_xlim() == (result.surface.x[0], result.surface.x[-1])
    assert np.nanmax(result.surface.touch) <= fig.shown_max + 1e-9


def test_all_figures_have_labelled_colour_bars(result):
    for f in all_figures(result):
        for ax in f.figure.axes[1:]:
            assert ax.get_ylabel(), f.name


def test_failed_report_writes_nothing(result, tmp_path, monkeypatch):
    """Every output is built in memory before any is written: a failure while drawing the report
    leaves the previous files as they were and no temporary files behind."""
    from grounding import cli

    json_file, pdf_file = tmp_path / "r.json", tmp_path / "r.pdf"
    json_file.write_text("previous")
    pdf_file.write_bytes(b"previous")

    def boom(r):
        raise RuntimeError("figure failed")

    monkeypatch.setattr(report_build, "all_figures", boom)
    with pytest.raises(RuntimeError):
        cli._write_outputs(result, str(json_file), str(pdf_file), None, None)
    assert json_file.read_text() == "previous" and pdf_file.read_bytes() == b"previous"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["r.json", "r.pdf"]


def test_csv_has_every_map_point(result):
    rows = surface_csv(result).decode().splitlines()
    data = [r for r in rows if not r.startswith("#")]
    assert data[0] == "x_m,y_m,potential_v,touch_v,step_v"
    assert len(data) - 1 == result.surface.potential.size
    assert all(("CAUTION" in r) for r in rows[1:4])


def test_cli_writes_report_plots_and_csv(tmp_path):
    case = tmp_path / "c.yaml"
    case.write_text(SMALL)
    res = CliRunner().invoke(main, ["study", str(case), "--quiet", "--report", str(tmp_path / "r.pdf"),
                                    "--plots", str(tmp_path / "figs"), "--csv", str(tmp_path / "m.csv")])
    assert res.exit_code == 0, res.output
    assert (tmp_path / "r.pdf").read_bytes().startswith(b"%PDF")
    names = ["leakage", "plan", "potential", "profile", "step", "touch"]
    assert sorted(p.name for p in (tmp_path / "figs").iterdir()) == \
        sorted([f"{n}.png" for n in names] + [f"{n}.svg" for n in names])
    assert (tmp_path / "figs" / "plan.svg").read_text().lstrip().startswith("<?xml")
    assert (tmp_path / "m.csv").stat().st_size > 0


def test_report_lists_every_rod_coordinate_and_reading(tmp_path):
    """A reviewer can check the layout and the sounding without the case file: every rod's top and every
    reading is in the text of the PDF."""
    import io
    from pathlib import Path

    import pypdf

    from grounding import load_case, run_study
    from grounding.outputs.report import build_report

    case = load_case(Path(__file__).resolve().parents[1] / "cases" / "kestrel-bend-fitted.yaml")
    r = run_study(case, estimate_error=False)
    text = " ".join(p.extract_text() for p in pypdf.PdfReader(io.BytesIO(build_report(r, date="2026-12-02"))).pages)
    for rod in case.electrodes.rods:
        assert "rod, top ({:g}, {:g}, {:g})".format(*rod.top) in text
    rd = case.soil_fit.readings
    for s, rho in zip(rd.spacing, rd.apparent_resistivity):
        assert f"{rho:.4g}" in text
    assert "largest spacing" in text


def test_report_leaves_no_figure_open():
    """Building a report left the unused raster plan open: in a long-running process (the Python API, many
    reports) matplotlib kept every one (it warned after 20)."""
    import matplotlib.pyplot as plt

    from grounding import parse_case, run_study
    from grounding.outputs.report import build_report
    from tests.conftest import case_text

    r = run_study(parse_case(case_text(
        "grids: [{origin: [0, 0], size: [20, 20], meshes: [2, 2], depth: 0.5, diameter: 0.01}]\n",
        extra="discretization: {max_segment: 2}\nsurface: {resolution: 2}\n")), estimate_error=False)
    before = set(plt.get_fignums())
    build_report(r, date="2026-12-02")
    assert set(plt.get_fignums()) == before


def test_footer_carries_the_cautions_own_text_on_every_page(pdf):
    reader = PdfReader(io.BytesIO(pdf))
    for page in reader.pages:
        text = squash(page.extract_text())
        for caution in CAUTIONS:
            assert squash(caution) in text


def test_method_section_says_what_ran_dense_equipotential_uniform(result):
    from grounding.outputs.report.method import method_paragraphs

    text = " ".join(method_paragraphs(result))
    assert "one equipotential body" in text and "Cholesky" in text and "uniform soil" in text
    assert "conjugate gradients" not in text and "GMRES" not in text and "image series" not in text


def test_method_section_names_the_coupled_solve_and_the_iterative_solve():
    """A conductor-impedance study is described as the coupled metal–soil solve; an iterative two-layer study as
    conjugate gradients on the compressed operator with the image series (not the fixed Cholesky text)."""
    from grounding import load_case
    from grounding.outputs.report.method import method_paragraphs
    from tests.golden.harness import ROOT

    coupled = " ".join(method_paragraphs(run_study(load_case(ROOT / "cases/kestrel-bend-steel-lead.yaml"),
                                                   estimate_error=False)))
    assert "solved together as one network" in coupled and "LU factorisation" in coupled
    assert "one equipotential body" not in coupled and "Cholesky" not in coupled
    iterative = " ".join(method_paragraphs(run_study(load_case(ROOT / "tests/golden/cases/iterative-two-layer.yaml"),
                                                     estimate_error=False)))
    assert "conjugate gradients" in iterative and "iterations" in iterative and "image series" in iterative
    assert "Cholesky" not in iterative


def test_probabilities_near_certainty_are_printed_as_bounds():
    """A first-order log-normal probability of 0.999999 is not certainty: every output prints it as a bound."""
    from grounding.outputs.summary_text import probability_text
    assert probability_text(1 - 1e-9) == "> 99.99 %"
    assert probability_text(1e-9) == "< 0.01 %"
    assert probability_text(0.1234) == "12.3 %"
