"""The HTML report of a fit output folder: one self-contained, escaped page whose numbers are
those of summary.json (the run folder and the page parser: tests/html_setup.py). The figures are
compared byte for byte with the PNG files of the run.
"""

import base64
import copy
import hashlib
import io
import math
import re

import pytest
from astropy.table import Table
from html_setup import NAME, Page, assert_printed, copy_run, fitted_run, row_cells, write_report
from PIL import Image


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    return fitted_run(tmp_path_factory)


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
        cells = row_cells(html_text, row_id)
        unit = cells[3]
        assert_printed(cells[0], unit, q["median"])
        for cell, (lo, hi) in zip(cells[1:3], (("p16", "p84"), ("p2.5", "p97.5")), strict=True):
            a, b = cell.split("&ndash;")
            assert_printed(a, unit, q[lo])
            assert_printed(b, unit, q[hi])

    for name, m in s["models"].items():
        d = m["derived"]
        check(f"{name}-m_half_msun", d["m_half_msun"])
        check(f"{name}-ml_half_v", d["ml_half_v"])
        for group in ("log10_j", "log10_d"):
            for key in ("0.1", "0.2", "0.5", "2rh"):
                if group in d:
                    check(f"{name}-{group}-{key}", d[group][key])
        check(f"{name}-binary_fraction", m["binary_fraction"])
        cells = row_cells(html_text, f"{name}-effective_members")
        assert_printed(cells[0], "", m["effective_members"])
        for row, a, b in (("evidence", "log_z", "log_z_err"), ("loo", "elpd", "se")):
            cells = row_cells(html_text, f"{name}-{row}")
            x, err = cells[0].split("&plusmn;")
            src = m["evidence"] if row == "evidence" else m["loo"]
            assert_printed(x, "", src[a])
            assert_printed(err, "", src[b])
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
        if "NOT CONVERGED" in w:  # said once, in the banner at the top, with its problems
            name = w.split()[1]
            banner = page.text_of(f"banner-nc-{name}")
            assert all(p in banner for p in s["models"][name]["problems"])
            assert w not in page.text
        else:
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
        assert ("not converged" in row) == (not m["converged"])  # marked; said loudly at the top
        for p in m["problems"]:
            assert p in row
        assert row.endswith("fresh")  # how the chains started: this run fitted from scratch


def test_diagnostics_say_how_the_chains_started(run, tmp_path):
    s = copy.deepcopy(run["summary"])
    s["models"]["nfw"]["warm_start"] = {
        "from": "/w/runs/0002", "warmup": 150, "mass_matrix": "earlier posterior"
    }  # fmt: skip
    s["models"]["stars-only"]["reused_from"] = "/w/runs/0003"
    page = Page(write_report(copy_run(run, tmp_path / "warm"), s))
    assert page.text_of("diag-nfw").endswith("warm start from 0002: 150 warmup, its mass matrix")
    assert page.text_of("diag-stars-only").endswith("reused from 0003 (inputs unchanged)")


def test_caveats_in_plain_words(run):
    caveats = run["page"].text_of("sec-caveats").lower()
    for word in ("spherical", "equilibrium", "prior", "bayes factor", "binar", "foreground"):
        assert word in caveats, word
    assert "anisotropy" in caveats and "degenera" in caveats
    # J and D: truncated at each draw's Jacobi radius by default, untruncated when switched off,
    # and the 2 R_e/d angle is the projected radius's
    assert "jacobi radius" in caveats and "untruncated" in caveats
    assert "circularised projected half-light radius" in caveats


def test_summary_states_the_jd_conventions(run):
    conv = run["summary"]["jd_conventions"]
    # the run's own statement (a fit truncates at each draw's Jacobi radius by default)
    trunc = run["summary"]["models"]["nfw"]["jd_truncation"]
    assert conv["halo_truncation"] == trunc["statement"] and "Jacobi radius" in trunc["statement"]
    assert run["page"].text_of("nfw-jd-truncation").endswith(trunc["statement"])
    assert "circularised projected half-light radius" in conv["2rh"]
    page, s = run["page"], run["summary"]
    ang = s["models"]["nfw"]["derived"]["angle_2rh_deg"]["median"]
    # 2 R_e / d with R_e = r_half sqrt(1 - e) d / d0: the angle is 2 r_half sqrt(1 - e) / d0, the
    # projected circularised radius's (the 3-D r_1/2 would give 1.305 times more for Plummer)
    sat = s["satellite"]
    r_half = s["models"]["nfw"]["parameters"]["r_half_pc"]["median"] * 1e-3
    expect = 2 * r_half * math.sqrt(1 - sat.get("ellipticity", 0.0)) / sat["distance_kpc"]
    assert ang == pytest.approx(math.degrees(expect), rel=0.02)
    assert "2 Re/d" in page.text_of("sec-models")
    table = Table.read(run["dir"] / "summary.ecsv", format="ascii.ecsv")
    assert table.meta["jd_conventions"] == conv


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
