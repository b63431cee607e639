"""The HTML report rendered by headless Chromium: the DOM it builds and a screenshot."""

import os
import shutil
import subprocess

import numpy as np
import pytest
from browser_cdp import Chromium
from html_setup import NAME, Page, fitted_run
from PIL import Image

CHROMIUM_TIMEOUT_S = 120
INSTALL_HINT = (
    "headless Chromium is needed for this test and CI installs it: run "
    "`apt-get install chromium` (Debian; the binary is chromium or chromium-browser)"
)


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    return fitted_run(tmp_path_factory)


def _chromium():
    exe = shutil.which("chromium") or shutil.which("chromium-browser")
    if exe is None:
        pytest.fail(f"chromium not found on PATH: {INSTALL_HINT}")
    return exe


def _run_chromium(exe, tmp_path, *args):
    """Headless Chromium with a private profile and HOME under ``tmp_path``, no network."""
    home = tmp_path / "home"
    for sub in ("home", "profile", "config", "cache"):
        (tmp_path / sub).mkdir(exist_ok=True)
    env = dict(
        os.environ,
        HOME=str(home),
        XDG_CONFIG_HOME=str(tmp_path / "config"),
        XDG_CACHE_HOME=str(tmp_path / "cache"),
    )
    cmd = [
        exe,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        f"--user-data-dir={tmp_path / 'profile'}",
        "--no-first-run",
        "--no-default-browser-check",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--disable-extensions",
        "--disable-default-apps",
        *args,
    ]
    try:
        res = subprocess.run(
            cmd, capture_output=True, text=True, timeout=CHROMIUM_TIMEOUT_S, env=env, check=False
        )
    except subprocess.TimeoutExpired:
        pytest.fail(f"chromium did not finish within {CHROMIUM_TIMEOUT_S} s: {' '.join(cmd)}")
    assert res.returncode == 0, f"chromium exit {res.returncode}: {res.stderr[-2000:]}"
    return res


def test_headless_chromium_renders_the_report(run, tmp_path):
    exe = _chromium()
    uri = run["report"].resolve().as_uri()
    s = run["summary"]

    dom = Page(_run_chromium(exe, tmp_path, "--dump-dom", uri).stdout)
    assert dom.images() == run["page"].images()  # every figure, same data
    assert len(dom.images()) == len(s["figures"])
    assert NAME in dom.text_of("title")
    for name, m in s["models"].items():
        assert f"Model {name}" in dom.text
        if "vs_stars_only" in m:
            assert m["vs_stars_only"]["verdict"] in dom.text_of(f"verdict-{name}")
    assert "NOT RESOLVED" in dom.text_of("banner-dispersion")
    assert "Caveats" in dom.text
    assert s["verdict"]["text"].splitlines()[0] in dom.text_of("verdict-block")

    shot = tmp_path / "shot.png"
    _run_chromium(
        exe, tmp_path, f"--screenshot={shot}", "--window-size=1100,2400", "--hide-scrollbars", uri
    )
    assert shot.is_file(), "chromium wrote no screenshot"
    with Image.open(shot) as im:
        assert im.format == "PNG"
        px = np.asarray(im.convert("RGB"), dtype=int)
    assert px.shape[:2] == (2400, 1100)
    colours = np.unique(px.reshape(-1, 3), axis=0)
    assert len(colours) > 50, f"screenshot nearly blank: {len(colours)} colours"
    ink = np.any(px < 200, axis=2).mean()
    assert ink > 0.01, f"screenshot nearly blank: {ink:.3%} dark pixels"
    # the style sheet is applied: the dispersion banner's border red (#b3141b) is on screen
    red = np.all(np.abs(px - np.array([0xB3, 0x14, 0x1B])) < 40, axis=2).sum()
    assert red > 500, f"banner colour not rendered ({red} pixels)"


#: the first screen of a laptop browser window [CSS px] (common practice)
VIEWPORT = (1280, 800)
#: the report's sections in reading order
SECTIONS = ("verdict", "models", "figures", "comparison", "diagnostics", "inputs", "notes",
            "caveats")  # fmt: skip


def test_verdict_above_the_fold_and_a_screenshot_per_section(run, tmp_path):
    """Laid out by Chromium (DevTools protocol over a pipe): the verdict box lies inside the
    first viewport, the sections follow in reading order, and each section's screenshot, saved
    in this test's folder, is the size of its box and not blank."""
    width, height = VIEWPORT
    shots = tmp_path / "sections"
    shots.mkdir()
    with Chromium(_chromium(), tmp_path / "chromium", CHROMIUM_TIMEOUT_S) as browser:
        browser.open(run["report"].resolve().as_uri(), width, height)
        assert browser.evaluate("window.innerHeight") == height
        boxes = browser.boxes('section[id^="sec-"], #verdict-block')
        box = boxes["verdict-block"]
        assert box["height"] > 50 and box["y"] >= 0
        assert box["y"] + box["height"] <= height, f"verdict below the fold: {box}"
        tops = [boxes[f"sec-{k}"]["y"] for k in SECTIONS]
        assert tops == sorted(tops), dict(zip(SECTIONS, tops, strict=True))
        for key in SECTIONS:
            b = boxes[f"sec-{key}"]
            path = browser.screenshot(b, shots / f"{key}.png")
            with Image.open(path) as im:
                assert im.format == "PNG"
                assert abs(im.width - b["width"]) <= 1 and abs(im.height - b["height"]) <= 1
                px = np.asarray(im.convert("RGB"), dtype=int)
            ink = np.any(px < 200, axis=2).mean()
            assert ink > 0.005, f"section {key}: screenshot nearly blank ({ink:.3%} dark pixels)"
    assert sorted(p.name for p in shots.iterdir()) == sorted(f"{k}.png" for k in SECTIONS)
