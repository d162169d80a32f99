"""Report pages (``ptares report``) for every kind of output folder, rendered in a real headless browser, and every
command's figures in PNG, PDF and SVG.

The browser is Debian's Chromium driven through its ChromeDriver (selenium).  Where they are not installed the
browser tests are skipped, unless ``PTARES_BROWSER_TESTS=required`` (set by ``.ci/run``, which installs them).
Screenshots of each rendered page are kept in ``test-artifacts/`` (or ``$PTARES_TEST_ARTIFACTS``).
"""

import os
import re
import shutil
import xml.etree.ElementTree as ElementTree
from pathlib import Path

import pytest

from ptares.cli import main

CONFIG = """
[run]
name = "report-check"
seed = 5
[array]
random = {count = 4}
[observing]
span = "6 yr"
cadence = "30 d"
toa_error = "300 ns"
[noise.red]
amplitude = 1e-14
harmonics = 5
[gwb]
amplitude = 3e-15
harmonics = 5
[correlate]
scrambles = 0
phase_shifts = 20
fit_trials = 20
[fit]
max_steps = 150
red = "free"
red_harmonics = 5
[compare]
samples = 100
direct_fit = "never"
[sensitivity]
amplitudes = [1e-15, 1e-14]
years = [3, 6]
curve_points = 30
map_step = 15
[sweep]
realisations = 2
[sweep.axes]
"gwb.amplitude" = [0.0, 1e-14]
"""

#: Output kind -> (command words after the config or dataset, the tables its page must hold by id).
KINDS = {
    "simulate": (["simulate", "{config}"], ["provenance", "pulsars", "dataset-numbers"]),
    "correlate": (["correlate", "{dataset}", "--config", "{config}"], ["provenance", "statistics"]),
    "fit": (["fit", "{config}"], ["provenance", "fit-parameters"]),
    "compare": (["compare", "{config}"], ["provenance", "compare-numbers", "uncorrelated-fit-parameters"]),
    "noise": (["noise", "{config}"], ["provenance", "noise-pulsars"]),
    "sweep": (["sweep", "{config}"], ["provenance", "detection"]),
    "sensitivity": (["sensitivity", "{config}"], ["provenance", "forecast", "forecast-years"]),
}


@pytest.fixture(scope="module")
def outputs(tmp_path_factory):
    """One output folder per command, each run with ``--figure-formats pdf svg``; made once for all test workers
    (the first to take the lock makes them, the others wait and reuse them)."""
    import fcntl

    run = os.environ.get("PYTEST_XDIST_TESTRUNUID")  # one value for all workers of this run (pytest-xdist)
    root = tmp_path_factory.getbasetemp().parent / f"report-outputs-{run}" if run else tmp_path_factory.mktemp("report")
    root.mkdir(exist_ok=True)
    folders = {kind: root / kind for kind in KINDS}
    with open(root / "lock", "w") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX)
        if not (root / "done").exists():
            config = root / "array.toml"
            config.write_text(CONFIG)
            for kind, (words, _) in KINDS.items():
                arguments = [w.format(config=config, dataset=folders["simulate"] / "dataset.h5") for w in words]
                assert main([*arguments, "--out", str(folders[kind]), "--overwrite", "--figure-formats", "pdf",
                             "svg"]) == 0, kind
            (root / "done").touch()
    return folders


def test_every_command_writes_each_figure_as_png_pdf_and_svg(outputs):
    """Every PNG has a PDF (a '%PDF' file) and an SVG (XML with an svg root) of the same name beside it."""
    for kind, folder in outputs.items():
        pngs = sorted(folder.glob("*.png"))
        assert pngs, kind
        for png in pngs:
            assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
            assert png.with_suffix(".pdf").read_bytes()[:5] == b"%PDF-", png
            assert ElementTree.parse(png.with_suffix(".svg")).getroot().tag.endswith("svg"), png


def test_provenance_records_the_command_version_and_seed(outputs):
    import json

    record = json.loads((outputs["correlate"] / "provenance.json").read_text())
    assert record["command"].startswith("ptares correlate ") and "--figure-formats pdf svg" in record["command"]
    assert record["kind"] == "correlate" and record["ptares_version"] and record["finished"]
    assert json.loads((outputs["simulate"] / "provenance.json").read_text())["seed"] == 5


@pytest.mark.parametrize("kind", list(KINDS))
def test_report_page_is_self_contained_and_warns(outputs, kind, tmp_path):
    folder = outputs[kind]
    assert main(["report", str(folder), "--out", str(tmp_path / "page.html")]) == 0
    page = (tmp_path / "page.html").read_text()
    for table in KINDS[kind][1]:
        assert f"id='{table}'" in page, table
    # nothing fetched from elsewhere: every image is a data URI, no script, link or remote address
    assert not re.search(r"""(src|href)\s*=\s*['"](?!data:|#)""", page)
    assert "<script" not in page and "<link" not in page
    images = len(re.findall(r"<img ", page))
    assert images >= len(list(folder.glob("*.png")))
    if kind in ("fit", "compare"):  # 150 steps: neither fit converges, and the page says so
        assert "has not converged" in page


def test_bad_report_folders_are_one_line(tmp_path, capsys):
    assert main(["report", str(tmp_path / "absent")]) == 2
    assert main(["report", str(tmp_path)]) == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 2 and "is not a folder" in lines[0] and "holds no ptares outputs" in lines[1]
    assert not (tmp_path / "report.html").exists()


def _browser():
    """A headless Chromium driven by its ChromeDriver, or a skip (a failure where browser tests are required)."""
    chromium, driver = shutil.which("chromium"), shutil.which("chromedriver")
    required = os.environ.get("PTARES_BROWSER_TESTS") == "required"
    if not (chromium and driver):
        if required:
            pytest.fail("PTARES_BROWSER_TESTS=required but chromium and chromedriver are not installed")
        pytest.skip("Chromium and ChromeDriver are not installed (Debian packages chromium, chromium-driver)")
    from selenium import webdriver
    from selenium.webdriver.chrome.options import Options
    from selenium.webdriver.chrome.service import Service

    options = Options()
    options.binary_location = chromium
    for flag in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update", "--disable-sync",
                 "--window-size=1200,1600"):
        options.add_argument(flag)
    return webdriver.Chrome(service=Service(driver), options=options)


def test_report_pages_render_in_a_real_browser(outputs, tmp_path):
    """Each kind's page in headless Chromium: every image decodes (complete, natural width > 0), the main tables
    are in the rendered document, the page fetched nothing but itself; a screenshot of each is kept."""
    artefacts = Path(os.environ.get("PTARES_TEST_ARTIFACTS", Path(__file__).resolve().parents[1] / "test-artifacts"))
    artefacts.mkdir(parents=True, exist_ok=True)
    browser = _browser()
    try:
        for kind, (_, tables) in KINDS.items():
            page = tmp_path / f"{kind}.html"
            assert main(["report", str(outputs[kind]), "--out", str(page)]) == 0
            browser.get(page.as_uri())
            loaded = browser.execute_script(
                "return Array.from(document.images).map(i => i.complete && i.naturalWidth > 0)")
            assert loaded and all(loaded), kind
            for table in tables:
                element = browser.find_element("id", table)
                assert element.tag_name == "table" and element.find_elements("tag name", "tr"), (kind, table)
            fetched = browser.execute_script("return performance.getEntriesByType('resource').map(e => e.name)")
            assert all(name.startswith("data:") for name in fetched), fetched
            assert browser.save_screenshot(str(artefacts / f"report-{kind}.png"))
    finally:
        browser.quit()
