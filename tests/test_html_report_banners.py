"""The HTML report's banners (a model not converged, a dispersion not resolved, figures that
cannot be embedded) and its refusals of bad run folders."""

import copy
import json

import pytest
from html_setup import Page, copy_run, fitted_run, row_cells, sig_value, write_report

from halo.core.errors import InputError
from halo.products.html_report import write_html_report
from halo.results.verdict import build_verdict


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    return fitted_run(tmp_path_factory)


# ----------------------------------------------------------------------------- banner branches


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
    sigma = sig_value(row_cells(html_text, "ul-sigma_los")[2])
    assert sigma == pytest.approx(s["dispersion"]["sigma_upper95_kms"], rel=5e-3)
    for name, ul in s["upper_limits"].items():
        m = sig_value(row_cells(html_text, f"ul-{name}-m_half_msun")[2])
        assert m == pytest.approx(ul["m_half_msun_upper95"], rel=5e-3)
        for angle, val in (ul.get("log10_j_upper95") or {}).items():
            cell = row_cells(html_text, f"ul-{name}-log10_j_upper95-{angle.replace('.', '-')}")
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
    s["verdict"] = build_verdict(s, (0.0, 1.0))  # the verdict of the clean summary
    text = write_report(copy_run(run, tmp_path / "clean"), s)
    assert 'class="banner"' not in text
    assert "NOT CONVERGED" not in text and "NOT RESOLVED" not in text


def test_loud_banner_for_a_failed_model_escaped(run, tmp_path):
    s = copy.deepcopy(run["summary"])
    for m in s["models"].values():
        m["converged"], m["problems"] = True, []
    s["models"]["nfw"]["converged"] = False
    s["models"]["nfw"]["problems"] = ["r-hat <1.5> & rising"]
    page = Page(write_report(copy_run(run, tmp_path / "failed"), s))
    banner = page.text_of("banner-nc-nfw")
    assert "nfw did NOT CONVERGE" in banner and "r-hat <1.5> & rising" in banner
    assert "banner-nc-stars-only" not in page.by_id
    assert "(nfw not converged)" in page.text_of("verdict-nfw")


def test_missing_figure_is_reported_not_fatal(run, tmp_path):
    s = copy.deepcopy(run["summary"])
    s["figures"] = s["figures"] + ["figures/missing.png", "../outside.png"]
    page = Page(write_report(copy_run(run, tmp_path / "fig"), s))
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
