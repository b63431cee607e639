"""The HTML report of a fit output folder: one self-contained, escaped page that a browser renders.

One real run folder is made by a small fit (a cold stars-only mock of 40 stars, NFW against stars
only, 2 chains x 200 + 200) whose satellite name holds HTML special characters. The page is
checked with Python's html.parser and rendered by headless Chromium (the DOM it builds and a
screenshot). The figures are compared byte for byte with the PNG files of the run.
"""

import base64
import copy
import hashlib
import io
import json
import os
import re
import shutil
import subprocess
from html.parser import HTMLParser

import numpy as np
import pytest
from PIL import Image

from halo.core.errors import InputError
from halo.inputs.catalogue import read_catalogue
from halo.inputs.satellite import read_satellite
from halo.mock.catalogue import make_mock
from halo.pipeline.fit import FitSettings, fit
from halo.products.html_report import write_html_report

NAME = "Mock <b>& I"
SATELLITE_TOML = """\
name = "Mock <b>& I"
ra_deg = 40.0
dec_deg = 12.0
distance_kpc = 60.0
distance_err_kpc = 3.0
r_half_pc = 50.0
r_half_err_pc = 5.0
ellipticity = 0.2
position_angle_deg = 30.0
stellar_mass_msun = 8000.0
stellar_mass_err_msun = 2000.0
absolute_magnitude_v = -4.5
absolute_magnitude_v_err = 0.2
"""
SETTINGS = FitSettings(chains=2, warmup=200, draws=200, seed=1, progress=False)
CHROMIUM_TIMEOUT_S = 120
INSTALL_HINT = (
    "headless Chromium is needed for this test and CI installs it: run "
    "`apt-get install chromium` (Debian; the binary is chromium or chromium-browser)"
)


#: elements whose boundaries separate words in the rendered text
BLOCKS = {
    "p", "div", "li", "td", "th", "tr", "table", "h1", "h2", "h3", "dt", "dd", "ul", "dl",
    "section", "header", "nav", "figure", "figcaption", "title", "footer", "br", "details",
    "summary", "main", "body", "head",
}  # fmt: skip


class Page(HTMLParser):
    """Tags, attributes, text and the text of elements with an id, from html.parser."""

    def __init__(self, text):
        super().__init__(convert_charrefs=True)
        self.tags = []
        self.texts = []
        self.style = []
        self._stack = []  # (tag, id) of open elements
        self.by_id = {}  # id -> list of text pieces inside that element
        self.feed(text)
        self.close()

    def _gap(self, tag):
        if tag in BLOCKS:
            self.handle_data(" ")

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.tags.append((tag, attrs))
        self._gap(tag)
        if tag in ("img", "meta", "br", "hr", "input", "link"):
            return
        self._stack.append((tag, attrs.get("id")))
        if attrs.get("id"):
            self.by_id[attrs["id"]] = []

    def handle_endtag(self, tag):
        self._gap(tag)
        while self._stack:
            t, _ = self._stack.pop()
            if t == tag:
                break

    def handle_data(self, data):
        self.texts.append(data)
        if self._stack and self._stack[-1][0] == "style":
            self.style.append(data)
        for _, ident in self._stack:
            if ident:
                self.by_id[ident].append(data)

    @property
    def text(self):
        return " ".join("".join(self.texts).split())

    def text_of(self, ident):
        assert ident in self.by_id, f"no element with id {ident!r}"
        return " ".join("".join(self.by_id[ident]).split())

    def images(self):
        return [a.get("src", "") for t, a in self.tags if t == "img"]


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    inputs = tmp_path_factory.mktemp("html-inputs")
    sat_path = inputs / "satellite <s>.toml"
    sat_path.write_text(SATELLITE_TOML, encoding="utf-8")
    sat = read_satellite(sat_path)
    assert sat.name == NAME
    # a cold system (stars only, ~0.3 km/s) measured with 1-2 km/s errors: the dispersion is not
    # resolved, so the run exercises the loud banner and the upper limits
    mock = make_mock(sat, None, n_stars=40, v_sys=12.0, error_range_kms=(1.0, 2.0), seed=5)
    cat_path = inputs / "mock & <cat>.ecsv"
    mock.table.write(cat_path, format="ascii.ecsv")
    stars = read_catalogue(cat_path, sat)
    out = tmp_path_factory.mktemp("html-run")
    summary = fit(stars, sat, out, ["nfw"], SETTINGS, satellite_path=sat_path)
    assert summary["dispersion"]["resolved"] is False, summary["dispersion"]["message"]
    report = write_html_report(out)
    text = report.read_text(encoding="utf-8")
    return {
        "dir": out,
        "summary": json.loads((out / "summary.json").read_text()),
        "report": report,
        "html": text,
        "page": Page(text),
        "sat_path": sat_path,
        "cat_path": cat_path,
    }


def _row_cells(html_text, row_id):
    """Inner HTML of the <td> cells of the table row with id ``row_id``."""
    m = re.search(rf'<tr id="{re.escape(row_id)}">(.*?)</tr>', html_text, re.S)
    assert m, f"no table row {row_id!r}"
    return re.findall(r"<td[^>]*>(.*?)</td>", m.group(1), re.S)


def _assert_printed(cell_html, unit_html, value):
    """A printed number equals ``value`` to within half a unit of its last printed decimal.

    The unit cell may start with the row's power of ten, '10<sup>k</sup>'.
    """
    text = cell_html.strip()
    assert re.fullmatch(r"-?\d+(\.\d+)?", text), text
    decimals = len(text.split(".")[1]) if "." in text else 0
    k = re.match(r"\s*10<sup>(-?\d+)</sup>", unit_html)
    scale = 10.0 ** int(k.group(1)) if k else 1.0
    tol = 0.5 * 10.0**-decimals * scale * (1 + 1e-9)
    assert abs(float(text) * scale - value) <= tol, (text, unit_html, value)


def _sig_value(cell_html):
    """'6.53 &times; 10<sup>4</sup>' or '3706' -> float."""
    m = re.fullmatch(r"\s*(-?[\d.]+)(?: &times; 10<sup>(-?\d+)</sup>)?\s*", cell_html)
    assert m, cell_html
    return float(m.group(1)) * (10.0 ** int(m.group(2)) if m.group(2) else 1.0)


# ------------------------------------------------------------------------------- static checks


def test_written_atomically_at_the_default_path(run):
    assert run["report"] == run["dir"] / "report.html"
    assert not list(run["dir"].glob(".report.html*")), "temporary file left behind"
    assert run["html"].startswith("<!DOCTYPE html>")


def test_self_contained_no_scripts_no_external_resources(run):
    page = run["page"]
    names = {t for t, _ in page.tags}
    assert not names & {"script", "link", "iframe", "object", "embed", "base", "frame"}, names
    for tag, attrs in page.tags:
        for key in ("src", "href", "srcset", "action", "poster", "data"):
            if key in attrs:
                assert attrs[key].startswith(("data:", "#")), (tag, key, attrs[key][:80])
        assert not any(k.startswith("on") for k in attrs), (tag, attrs)  # no inline handlers
    css = "".join(page.style)
    assert css.strip(), "no inline style sheet"
    assert "url(" not in css and "@import" not in css
    assert not re.search(r"(https?|ftp)://", run["html"])
    # internal links point at ids that exist
    ids = {a["id"] for _, a in page.tags if "id" in a}
    for _, a in page.tags:
        if a.get("href", "").startswith("#"):
            assert a["href"][1:] in ids, a["href"]


def test_special_characters_are_escaped(run):
    page, text = run["page"], run["html"]
    assert "<b>" not in text and "<b>&" not in text
    assert "Mock &lt;b&gt;&amp; I" in text
    assert "b" not in {t for t, _ in page.tags}
    assert "cat" not in {t for t, _ in page.tags} and "s" not in {t for t, _ in page.tags}
    # after parsing, the name reads as written in the satellite file
    assert NAME in page.text_of("title")
    assert f"halo fit report: {NAME}" in page.text
    # the catalogue path (with '&', '<', '>') as recorded in summary.json
    assert str(run["cat_path"]) in page.text


def test_title_run_time_models_and_verdicts(run):
    page, s = run["page"], run["summary"]
    created = s["created"]  # ISO 8601, UTC
    assert f"Run of {created[:10]} {created[11:19]} UTC" in page.text
    for name, m in s["models"].items():
        assert f"Model {name}" in page.text_of(f"model-{name}")
        if "vs_stars_only" in m:
            c = m["vs_stars_only"]
            row = page.text_of(f"verdict-{name}")
            assert c["verdict"] in row
            ln_b, err = re.search(r"(-?\d+\.\d+) ± (\d+\.\d+)", row).groups()
            assert float(ln_b) == pytest.approx(c["ln_bayes_factor"], abs=0.005)
            assert float(err) == pytest.approx(c["ln_bayes_factor_err"], abs=0.005)
    assert "stars-only" in s["models"] and "nfw" in s["models"]


def test_headline_numbers_match_summary(run):
    html_text, s = run["html"], run["summary"]

    def check(row_id, q):
        cells = _row_cells(html_text, row_id)
        unit = cells[3]
        _assert_printed(cells[0], unit, q["median"])
        for cell, (lo, hi) in zip(cells[1:3], (("p16", "p84"), ("p2.5", "p97.5")), strict=True):
            a, b = cell.split("&ndash;")
            _assert_printed(a, unit, q[lo])
            _assert_printed(b, unit, q[hi])

    for name, m in s["models"].items():
        d = m["derived"]
        check(f"{name}-m_half_msun", d["m_half_msun"])
        check(f"{name}-ml_half_v", d["ml_half_v"])
        for group in ("log10_j", "log10_d"):
            for key in ("0.1", "0.2", "0.5", "2rh"):
                if group in d:
                    check(f"{name}-{group}-{key}", d[group][key])
        check(f"{name}-binary_fraction", m["binary_fraction"])
        cells = _row_cells(html_text, f"{name}-effective_members")
        _assert_printed(cells[0], "", m["effective_members"])
        for row, a, b in (("evidence", "log_z", "log_z_err"), ("loo", "elpd", "se")):
            cells = _row_cells(html_text, f"{name}-{row}")
            x, err = cells[0].split("&plusmn;")
            src = m["evidence"] if row == "evidence" else m["loo"]
            _assert_printed(x, "", src[a])
            _assert_printed(err, "", src[b])
    assert "log10_j" in s["models"]["nfw"]["derived"]
    assert "nfw-log10_j-0.5" in html_text and "stars-only-log10_j-0.5" not in html_text


def test_inputs_hashes_settings_notes_and_warnings(run):
    page, s = run["page"], run["summary"]
    inputs = page.text_of("inputs")
    # the hashes are recomputed here from the input files (hashlib, not halo)
    cat_sha = hashlib.sha256(run["cat_path"].read_bytes()).hexdigest()
    sat_sha = hashlib.sha256(run["sat_path"].read_bytes()).hexdigest()
    assert s["catalogue"]["sha256"] == cat_sha and s["satellite_sha256"] == sat_sha
    assert cat_sha in inputs and sat_sha in inputs
    assert f"catalogue rows {s['catalogue']['n_rows']}" in inputs
    assert f"stars (after merging epochs) {s['catalogue']['n_stars']}" in inputs
    settings = page.text_of("settings")
    for key in ("chains", "warmup", "draws", "seed"):
        assert f"{key} {s['settings'][key]}" in settings
    assert f"binaries {'on' if s['settings']['binaries'] else 'off'}" in settings
    assert f"foreground {'on' if s['settings']['foreground'] else 'off'}" in settings
    assert s["settings"]["foreground_reason"] in settings
    assert s["warnings"], "the run should carry warnings (dispersion, convergence)"
    for w in s["warnings"]:
        assert w in page.text_of("warnings")
    for n in s["notes"]:
        assert n in page.text_of("notes")
    members = page.text_of("members")
    assert f"stars in members.ecsv {s['catalogue']['n_stars']}" in members


def test_diagnostics_table(run):
    page, s = run["page"], run["summary"]
    for name, m in s["models"].items():
        row = page.text_of(f"diag-{name}")
        g = m["diagnostics"]
        assert f"{g['rhat_max']:.3f}" in row
        assert f"{g['ess_bulk_min']:.0f}" in row and f"{g['ess_tail_min']:.0f}" in row
        assert ("NOT CONVERGED" in row) == (not m["converged"])
        for p in m["problems"]:
            assert p in row
        assert row.endswith("fresh")  # how the chains started: this run fitted from scratch


def test_diagnostics_say_how_the_chains_started(run, tmp_path):
    s = copy.deepcopy(run["summary"])
    s["models"]["nfw"]["warm_start"] = {
        "from": "/w/runs/0002", "warmup": 150, "mass_matrix": "earlier posterior"
    }  # fmt: skip
    s["models"]["stars-only"]["reused_from"] = "/w/runs/0003"
    page = Page(_write(_copy_run(run, tmp_path / "warm"), s))
    assert page.text_of("diag-nfw").endswith("warm start from 0002: 150 warmup, its mass matrix")
    assert page.text_of("diag-stars-only").endswith("reused from 0003 (inputs unchanged)")


def test_caveats_in_plain_words(run):
    caveats = run["page"].text_of("sec-caveats").lower()
    for word in ("spherical", "equilibrium", "prior", "bayes factor", "binar", "foreground"):
        assert word in caveats, word
    assert "anisotropy" in caveats and "degenera" in caveats


def test_every_figure_embedded_as_png_with_caption(run):
    page, s, folder = run["page"], run["summary"], run["dir"]
    srcs = page.images()
    assert len(s["figures"]) >= 4
    assert len(srcs) == len(s["figures"])
    prefix = "data:image/png;base64,"
    for src, rel in zip(srcs, s["figures"], strict=True):
        assert src.startswith(prefix)
        data = base64.b64decode(src[len(prefix) :], validate=True)
        # PNG signature (PNG specification, ISO/IEC 15948, sec. 5.2)
        assert data[:8] == b"\x89PNG\r\n\x1a\n"
        assert data == (folder / rel).read_bytes()
        with Image.open(io.BytesIO(data)) as im:
            im.load()
            assert im.format == "PNG" and min(im.size) > 100
    n_captions = sum(1 for t, _ in page.tags if t == "figcaption")
    assert n_captions == len(srcs)
    for i, rel in enumerate(s["figures"], 1):
        assert rel in page.text_of(f"fig-{i}")


# ----------------------------------------------------------------------------- banner branches


def _copy_run(run, dest):
    dest.mkdir()
    shutil.copytree(run["dir"] / "figures", dest / "figures")
    shutil.copy2(run["dir"] / "members.ecsv", dest / "members.ecsv")
    return dest


def _write(folder, summary):
    (folder / "summary.json").write_text(json.dumps(summary), encoding="utf-8")
    return write_html_report(folder).read_text(encoding="utf-8")


def test_banners_follow_the_real_run(run):
    page, s = run["page"], run["summary"]
    ids = {a.get("id") for _, a in page.tags}
    for name, m in s["models"].items():
        assert (f"banner-nc-{name}" in ids) == (not m["converged"])
    banner = page.text_of("banner-dispersion")
    assert "NOT RESOLVED" in banner
    assert s["dispersion"]["message"] in banner
    # the 95% upper limits shown are those of summary.json
    html_text = run["html"]
    sigma = _sig_value(_row_cells(html_text, "ul-sigma_los")[2])
    assert sigma == pytest.approx(s["dispersion"]["sigma_upper95_kms"], rel=5e-3)
    for name, ul in s["upper_limits"].items():
        m = _sig_value(_row_cells(html_text, f"ul-{name}-m_half_msun")[2])
        assert m == pytest.approx(ul["m_half_msun_upper95"], rel=5e-3)
        for angle, val in (ul.get("log10_j_upper95") or {}).items():
            cell = _row_cells(html_text, f"ul-{name}-log10_j_upper95-{angle.replace('.', '-')}")
            assert float(cell[2]) == pytest.approx(val, abs=0.005)
    assert "log10_j_upper95" in s["upper_limits"]["nfw"]


def test_no_banner_for_a_clean_run(run, tmp_path):
    s = copy.deepcopy(run["summary"])
    for m in s["models"].values():
        m["converged"], m["problems"] = True, []
    s["dispersion"]["resolved"] = True
    s["upper_limits"] = None
    s["warnings"] = [
        w for w in s["warnings"] if "NOT CONVERGED" not in w and "NOT RESOLVED" not in w
    ]
    text = _write(_copy_run(run, tmp_path / "clean"), s)
    assert 'class="banner"' not in text
    assert "NOT CONVERGED" not in text and "NOT RESOLVED" not in text


def test_loud_banner_for_a_failed_model_escaped(run, tmp_path):
    s = copy.deepcopy(run["summary"])
    for m in s["models"].values():
        m["converged"], m["problems"] = True, []
    s["models"]["nfw"]["converged"] = False
    s["models"]["nfw"]["problems"] = ["r-hat <1.5> & rising"]
    page = Page(_write(_copy_run(run, tmp_path / "failed"), s))
    banner = page.text_of("banner-nc-nfw")
    assert "nfw did NOT CONVERGE" in banner and "r-hat <1.5> & rising" in banner
    assert "banner-nc-stars-only" not in page.by_id
    assert "(nfw not converged)" in page.text_of("verdict-nfw")


def test_missing_figure_is_reported_not_fatal(run, tmp_path):
    s = copy.deepcopy(run["summary"])
    s["figures"] = s["figures"] + ["figures/missing.png", "../outside.png"]
    page = Page(_write(_copy_run(run, tmp_path / "fig"), s))
    assert len(page.images()) == len(run["summary"]["figures"])
    text = page.text_of("banner-figures")
    assert "figures/missing.png: file not found" in text
    assert "../outside.png: outside the run folder" in text


def test_bad_folders_raise_input_error(run, tmp_path):
    with pytest.raises(InputError, match="no such folder"):
        write_html_report(tmp_path / "nowhere")
    empty = tmp_path / "empty"
    empty.mkdir()
    with pytest.raises(InputError, match=r"summary\.json: no such file"):
        write_html_report(empty)
    (empty / "summary.json").write_text("{not json")
    with pytest.raises(InputError, match=r"summary\.json: malformed JSON"):
        write_html_report(empty)
    s = copy.deepcopy(run["summary"])
    del s["models"]["nfw"]["evidence"]
    (empty / "summary.json").write_text(json.dumps(s))
    with pytest.raises(InputError, match=r"'models\.nfw\.evidence'"):
        write_html_report(empty)
    assert not (empty / "report.html").exists()


def test_explicit_path(run, tmp_path):
    out = write_html_report(run["dir"], tmp_path / "sub" / "r.html")
    assert out == tmp_path / "sub" / "r.html"
    assert Page(out.read_text(encoding="utf-8")).images() == run["page"].images()


# ----------------------------------------------------------------------------- a real browser


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
