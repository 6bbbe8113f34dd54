"""The interactive HTML view: self-contained, the values of the JSON and CSV results, and checked in a real
browser (headless Chromium through selenium and chromedriver, the browser-automation library)."""

from __future__ import annotations

import csv
import io
import json
import os
import re
import shutil
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from grounding.cli import main

CASE = """\
format: 1
title: small yard with rock and a pad
soil: {resistivity: 150}
surface_zones:
  - {name: yard rock, polygon: [[-1, -1], [21, -1], [21, 16], [-1, 16]], resistivity: 2500, thickness: 0.1}
fault: {current: 4000, split_factor: 0.7, x_over_r: 10, clearing_time: 0.3}
electrodes:
  grids: [{origin: [0, 0], size: [20, 15], meshes: [4, 3], depth: 0.6, diameter: 0.01}]
  rods: [{top: [0, 0, 0.6], length: 3, diameter: 0.016}]
separate_electrodes:
  - name: fence
    connection: floating
    conductors: [{start: [-2.5, -2.5, 0.3], end: [22.5, -2.5, 0.3], diameter: 0.01}]
discretization: {max_segment: 2.0}
surface: {margin: 4, resolution: 1.0}
probes: [[2.5, 2.5]]
"""
SCENARIOS = """\
scenarios:
  - name: as measured
  - name: wet rock
    surface_zones:
      - {name: yard rock, polygon: [[-1, -1], [21, -1], [21, 16], [-1, 16]], resistivity: 600, thickness: 0.1}
"""


def _study(tmp_path, text, name):
    path = tmp_path / f"{name}.yaml"
    path.write_text(text)
    out = {k: tmp_path / f"{name}.{k}" for k in ("html", "json", "csv")}
    res = CliRunner().invoke(main, ["study", str(path), "--html", str(out["html"]), "--json", str(out["json"]),
                                    "--csv", str(out["csv"]), "--quiet"])
    assert res.exit_code in (0, 1), res.output
    return out


@pytest.fixture(scope="module")
def view(tmp_path_factory):
    return _study(tmp_path_factory.mktemp("view"), CASE, "yard")


def _data(html_text: str) -> dict:
    m = re.search(r"<script type='application/json' class='study-data'[^>]*>(.*?)</script>", html_text, re.S)
    return json.loads(m.group(1))


def test_view_is_one_self_contained_file_with_the_cautions_first(view):
    text = view["html"].read_text(encoding="utf-8")
    assert not re.search(r"<script[^>]+src=", text) and not re.search(r"<link[^>]+href=", text)
    assert "plotly.js" in text                                   # the library is inlined
    caution = text.index("CAUTION")
    assert caution < text.index("<main>")
    assert "licensed professional engineer" in text[caution:text.index("<main>")]
    assert view["html"].stat().st_size < 10e6


def test_view_values_equal_the_json_results(view):
    data = _data(view["html"].read_text(encoding="utf-8"))
    summary = json.loads(view["json"].read_text())["summary"]
    assert data["worst"]["touch"]["value_v"] == pytest.approx(summary["max_touch_voltage_v"], abs=0.05)
    assert [data["worst"]["touch"]["x"], data["worst"]["touch"]["y"]] == pytest.approx(summary["max_touch_at"],
                                                                                          abs=0.005)
    assert data["worst"]["step"]["value_v"] == pytest.approx(summary["max_step_voltage_v"], abs=0.05)
    assert data["grid_resistance_ohm"] == pytest.approx(summary["grid_resistance_ohm"], rel=2e-6)


# ---- in a real browser -------------------------------------------------------------------------------
def _browser():
    chromium = shutil.which("chromium") or shutil.which("chromium-browser") or shutil.which("google-chrome")
    driver = shutil.which("chromedriver")
    try:
        import selenium  # noqa: F401
    except ImportError:
        selenium_ok = False
    else:
        selenium_ok = True
    if not (chromium and driver and selenium_ok):
        reason = (f"needs Chromium, chromedriver and selenium (found: chromium {chromium}, chromedriver {driver}, "
                  f"selenium {selenium_ok}); .ci/run installs Debian's chromium and chromium-driver")
        if os.environ.get("GROUNDING_BROWSER_REQUIRED") == "1":
            pytest.fail("a browser was installed for these tests but cannot be used: " + reason)
        pytest.skip(reason)
    from selenium import webdriver
    from selenium.webdriver.chrome.options import Options
    from selenium.webdriver.chrome.service import Service

    opts = Options()
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--window-size=1400,1000",
                "--disable-dev-shm-usage"):
        opts.add_argument(arg)
    opts.binary_location = chromium
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    return webdriver.Chrome(service=Service(driver), options=opts)


@pytest.fixture(scope="module")
def browser():
    d = _browser()
    yield d
    d.quit()


def _open_offline(browser, path: Path):
    browser.set_network_conditions(offline=True, latency=0, download_throughput=0, upload_throughput=0)
    browser.get(path.resolve().as_uri())
    for _ in range(100):                                     # plotly draws after its script ran
        if browser.execute_script("return document.querySelectorAll('.main-svg').length") > 0:
            break
        browser.implicitly_wait(0.1)
    return browser.execute_script("return document.querySelector('.js-plotly-plot')")


@pytest.mark.browser
def test_view_renders_offline_with_no_console_errors(browser, view, tmp_path):
    _open_offline(browser, view["html"])
    assert browser.execute_script("return document.querySelectorAll('.main-svg').length") >= 1
    assert browser.execute_script("return document.querySelectorAll('.heatmaplayer image, .hm image').length") >= 1
    errors = [e for e in browser.get_log("browser") if e["level"] == "SEVERE"]
    assert not errors, errors
    shot = tmp_path / "view.png"
    browser.save_screenshot(str(shot))
    from matplotlib.image import imread
    pixels = imread(shot)[..., :3]
    assert pixels.std() > 0.05                               # not blank
    assert len(np.unique((pixels.reshape(-1, 3) * 255).astype(int), axis=0)) > 200


@pytest.mark.browser
def test_hover_at_the_worst_touch_point_shows_the_reported_value(browser, view):
    _open_offline(browser, view["html"])
    summary = json.loads(view["json"].read_text())["summary"]
    text = browser.execute_script("""
        const gd = document.querySelector('.js-plotly-plot');
        const k = gd.data.findIndex(t => t.name === 'worst touch');
        Plotly.Fx.hover(gd, [{curveNumber: k, pointNumber: 0}]);
        return document.querySelector('.hoverlayer').textContent;""")
    assert f"{summary['max_touch_voltage_v']:,.0f} V" in text, text


@pytest.mark.browser
def test_map_in_the_browser_equals_the_csv_map(browser, view):
    _open_offline(browser, view["html"])
    z = browser.execute_script("""
        const gd = document.querySelector('.js-plotly-plot');
        const t = gd._fullData.find(t => t.type === 'heatmap' && (t.hovertemplate || '').includes('touch voltage'));
        const num = v => Number.isNaN(v) ? null : v;
        return {x: Array.from(t.x), y: Array.from(t.y), z: Array.from(t.z, row => Array.from(row, num))};""")
    rows = [r for r in csv.reader(io.StringIO(view["csv"].read_text())) if r and not r[0].startswith("#")][1:]
    table = {(round(float(r[0]), 3), round(float(r[1]), 3)): r[3] for r in rows}
    checked = 0
    for j, y in enumerate(z["y"]):
        for i, x in enumerate(z["x"]):
            expected = table[(round(x, 3), round(y, 3))]
            value = z["z"][j][i]
            if expected == "":
                assert value is None                          # outside the touch area: a gap
            else:
                assert value == pytest.approx(float(expected), abs=0.006, rel=1e-6)
                checked += 1
    assert checked > 100


@pytest.mark.browser
def test_scenarios_get_one_layer_set_each(browser, tmp_path):
    out = _study(tmp_path, CASE + SCENARIOS, "seasons")
    data = _data(out["html"].read_text(encoding="utf-8"))
    assert data["scenarios"] == ["as measured", "wet rock"]
    assert len(data["layers"]) == 8 and data["layers"][4].startswith("wet rock: ")
    _open_offline(browser, out["html"])
    names = browser.execute_script(
        "return document.querySelector('.js-plotly-plot').layout.updatemenus[0].buttons.map(b => b.label)")
    assert names == data["layers"]


def test_compare_writes_the_options_side_by_side(tmp_path):
    a, b = tmp_path / "a.yaml", tmp_path / "b.yaml"
    a.write_text(CASE)
    b.write_text(CASE.replace("meshes: [4, 3]", "meshes: [8, 6]").replace("small yard", "finer yard"))
    out = tmp_path / "cmp.html"
    res = CliRunner().invoke(main, ["compare", str(a), str(b), "--html", str(out), "--quiet"])
    assert res.exit_code in (0, 1), res.output
    text = out.read_text(encoding="utf-8")
    assert text.count("class='study-data'") == 2 and text.count("plotly.js v") == 1
    assert "Option 2: finer yard" in text
