"""The HTML reports in a real browser: headless Chromium driven by selenium.

Debian's ``chromium`` and ``chromium-driver`` packages are used through their explicit paths
(no browser download). Where they are missing the test is skipped with the reason, unless
``TRAPBUDGET_REQUIRE_BROWSER=1`` (set by ``.ci/run``, which installs them) turns the skip into
a failure. The page is loaded from disk with every host name unresolvable, so a report that
needed the network would show broken figures. Screenshots go to ``TRAPBUDGET_SCREENSHOTS``
when set, else to the test's temporary folder.
"""

from __future__ import annotations

import os
import shutil
from importlib import resources
from pathlib import Path

import pytest

from trapbudget.cli.main import main

CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
CHROMEDRIVER = shutil.which("chromedriver") or "/usr/bin/chromedriver"
REQUIRED = os.environ.get("TRAPBUDGET_REQUIRE_BROWSER") == "1"


def _browser_or_skip():
    missing = [p for p in (CHROMIUM, CHROMEDRIVER) if not Path(p).is_file()]
    try:
        from selenium import webdriver
        from selenium.webdriver.chrome.service import Service
    except ImportError:
        missing.append("the selenium package")
    if missing:
        reason = f"no headless browser: {', '.join(missing)} missing (apt install chromium "
        reason += "chromium-driver; pip install selenium)"
        if REQUIRED:
            pytest.fail(reason + " although TRAPBUDGET_REQUIRE_BROWSER=1")
        pytest.skip(reason)
    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for flag in (
        "--headless=new",
        "--disable-gpu",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--disable-quic",
        "--window-size=1280,900",
        # every host name fails to resolve: the report must not need the network
        "--host-resolver-rules=MAP * ~NOTFOUND",
    ):
        options.add_argument(flag)
    if hasattr(os, "geteuid") and os.geteuid() == 0:
        options.add_argument("--no-sandbox")
    return webdriver.Chrome(options=options, service=Service(executable_path=CHROMEDRIVER))


@pytest.fixture(scope="module")
def reports(tmp_path_factory) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("browser")
    package = resources.files("trapbudget.examples")
    for name in (
        "harrier-rb87.toml",
        "harrier-upgrade.toml",
        "harrier-detuning-scan.csv",
        "harrier-time-of-flight.csv",
    ):
        (folder / name).write_bytes((package / name).read_bytes())
    scenario = folder / "harrier-rb87.toml"
    study = ["rank", scenario, "--samples", "256", "--no-convergence"]
    scan = ["scan", scenario, "detuning", "--range", "-30MHz", "-2MHz", "--samples", "128"]
    spec = ["spec", folder / "harrier-upgrade.toml", "--samples", "1024"]
    calibration = [
        "calibrate",
        scenario,
        folder / "harrier-detuning-scan.csv",
        folder / "harrier-time-of-flight.csv",
        "--free",
        "loading_prefactor,sub_doppler_coefficient",
    ]
    out = {}
    for label, argv in (
        ("study", study),
        ("scan", scan),
        ("spec", spec),
        ("calibration", calibration),
    ):
        out[label] = folder / label
        assert main([str(a) for a in [*argv, "--out", out[label], "--quiet"]]) == 0
    return out


def _shots_dir(tmp_path: Path) -> Path:
    target = Path(os.environ.get("TRAPBUDGET_SCREENSHOTS", tmp_path))
    target.mkdir(parents=True, exist_ok=True)
    return target


#: A heading each report must show.
HEADINGS = {
    "study": "Bottom line",
    "scan": "Scan of detuning",
    "spec": "Tolerance allocation",
    "calibration": "Calibration to measurements",
}


@pytest.mark.parametrize("label", list(HEADINGS))
def test_report_loads_offline_with_every_figure_visible(reports, label, tmp_path):
    driver = _browser_or_skip()
    try:
        driver.get((reports[label] / "report.html").resolve().as_uri())
        state = driver.execute_script("return document.readyState")
        assert state == "complete"
        images = driver.execute_script(
            "return Array.from(document.images).map(function (img) {"
            "  var r = img.getBoundingClientRect();"
            "  var s = window.getComputedStyle(img);"
            "  return {src: img.currentSrc.slice(0, 40), complete: img.complete,"
            "          natural: img.naturalWidth, width: r.width, height: r.height,"
            "          shown: s.display !== 'none' && s.visibility !== 'hidden'};"
            "});"
        )
        assert images, "the report shows no figure"
        for image in images:
            assert image["complete"] and image["natural"] > 0, image
            assert image["width"] > 0 and image["height"] > 0 and image["shown"], image
            assert image["src"].startswith("data:image/png"), image
        external = driver.execute_script(
            "return Array.from(document.querySelectorAll('[src],link[href]'))"
            ".map(function (e) { return e.getAttribute('src') || e.getAttribute('href'); })"
            ".filter(function (u) { return /^(https?:)?\\/\\//.test(u); });"
        )
        assert external == []
        headings = driver.execute_script(
            "return Array.from(document.querySelectorAll('h2')).map(function (h) {"
            " return h.textContent.trim(); });"
        )
        assert any(HEADINGS[label] in h for h in headings), headings
        height = driver.execute_script("return document.documentElement.scrollHeight")
        driver.set_window_size(1280, min(int(height) + 100, 16000))
        shot = _shots_dir(tmp_path) / f"report-{label}.png"
        assert driver.save_screenshot(str(shot))
        assert shot.stat().st_size > 10_000
    finally:
        driver.quit()
