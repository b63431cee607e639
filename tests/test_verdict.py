"""The verdict block (summary.json ``verdict``, the text printed first, the top of report.html):
its numbers are the summary's own, the binary-fraction flag, the convergence state beside every
graded word, the nature beside it; members.ecsv and summary.ecsv with units."""

import copy

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table
from astropy.wcs import WCS
from fit_setup import DWARF, write_satellite
from html_setup import Page, copy_run, fitted_run, write_report
from scipy import stats

from halo.inputs.catalogue import read_catalogue
from halo.inputs.satellite import read_satellite
from halo.products.report_verdict import verdict_block
from halo.products.text_report import format_summary
from halo.products.units import quantity_unit
from halo.products.verdict_text import nature_lines
from halo.results.members import members_table
from halo.results.verdict import build_verdict

STARS = "stars-only"


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    return fitted_run(tmp_path_factory)


def _q(med, lo, hi, p2=None, p97=None):
    return {"median": med, "p16": lo, "p84": hi, "p2.5": p2 or lo, "p97.5": p97 or hi}


def _summary(fb_stars=(0.89, 0.80, 0.95, 0.70, 0.995), converged=(True, True), ln_b=8.0):
    """A hand-made summary of a resolved dwarf: nfw against stars only."""
    model = {
        "converged": converged[0],
        "parameters": {"v_sys": _q(50.0, 49.4, 50.6)},
        "derived": {"ml_half_v": _q(230.0, 160.0, 320.0), "ml_half_v_lower95": 130.0},
        "evidence": {"log_z": -650.0, "log_z_err": 0.1},
        "vs_stars_only": {
            "ln_bayes_factor": ln_b,
            "ln_bayes_factor_err": 0.1,
            "verdict": "strong evidence for dark matter",
        },
        "binary_fraction": _q(0.09, 0.03, 0.2),
    }
    stars = {
        "converged": converged[1],
        "parameters": {"v_sys": _q(50.1, 49.5, 50.7)},
        "derived": {"ml_half_v": _q(1.5, 1.1, 2.0), "ml_half_v_lower95": 1.0},
        "evidence": {"log_z": -658.0, "log_z_err": 0.05},
        "binary_fraction": _q(*fb_stars),
    }
    return {
        "models": {"nfw": model, STARS: stars},
        "dispersion": {
            "resolved": True,
            "sigma_median_kms": 3.37,
            "sigma_p16_kms": 2.9,
            "sigma_p84_kms": 3.9,
            "sigma_upper95_kms": 4.2,
            "two_delta_ln_l": 40.0,
        },
        "estimators": {
            "sigma_los_kms": 4.19,
            "n_stars_used": 77,
            "selection": "member_prob >= 0.5",
        },
        "catalogue": {"n_stars": 100},
        "settings": {"binaries": True},
    }


def test_binary_fraction_at_the_prior_edge_is_flagged():
    v = build_verdict(_summary(), (0.0, 1.0), {"all_stars_kms": 30.0, "members_kms": 4.0})
    b = v["stars_only_binary_fraction"]
    assert b["at_prior_edge"] and b["most_binaries"]
    assert b["flag"] == "stars alone need most stars to be binaries"
    assert "stars alone need most stars to be binaries" in v["text"]
    assert b["median"] == 0.89 and b["dark_median"] == 0.09 and b["prior"] == [0.0, 1.0]
    # the same posterior well inside a wider prior, or a modest fraction: no flag
    v = build_verdict(_summary(), (0.0, 1.5))
    assert v["stars_only_binary_fraction"]["flag"] is None and "binaries" not in v["text"]
    v = build_verdict(_summary(fb_stars=(0.3, 0.2, 0.4, 0.1, 0.6)), (0.0, 1.0))
    assert v["stars_only_binary_fraction"]["flag"] is None
    # at the edge of a prior that stops below one half: at the edge, but not "most"
    v = build_verdict(_summary(fb_stars=(0.45, 0.40, 0.48, 0.3, 0.499)), (0.0, 0.5))
    assert "upper edge" in v["stars_only_binary_fraction"]["flag"]
    # binaries off: nothing to flag
    assert build_verdict(_summary(), None)["stars_only_binary_fraction"] is None


def test_graded_words_carry_the_convergence_state():
    ok = build_verdict(_summary(), (0.0, 1.0))
    bad = build_verdict(_summary(converged=(False, True)), (0.0, 1.0))
    assert ok["converged"] and not bad["converged"] and bad["not_converged"] == ["nfw"]
    assert bad["text"].splitlines()[0] == (
        "VERDICT (nfw against stars alone; not converged: nfw, so its numbers are unreliable)"
    )
    for v, state in ((ok, "[nfw and stars-only converged]"), (bad, "[not converged: nfw]")):
        graded = [
            ln
            for ln in v["text"].splitlines()
            if any(w in ln for w in ("evidence for", "reading:", "binaries:", "old stars"))
        ]
        assert len(graded) == 4
        assert all(state in ln for ln in graded), v["text"]
    # Kass & Raftery (1995, JASA 90, 773, sec. 3.2): 2 ln B = 16 > 10 is "very strong"
    assert ok["bayes_factor"]["grade"] == "very strong"
    assert ok["reading"].startswith("a dark-matter-dominated galaxy")
    # 2 ln B = 1 < 2: not worth more than a bare mention -> undecided
    v = build_verdict(_summary(ln_b=0.5), (0.0, 1.0))
    assert v["bayes_factor"]["grade"] == "none" and v["reading"].startswith("undecided")
    v = build_verdict(_summary(ln_b=-4.0), (0.0, 1.0))
    assert "only if most stars are binaries" in v["reading"]


def test_why_the_dispersions_differ_is_said_with_numbers():
    v = build_verdict(_summary(), (0.0, 1.0), {"all_stars_kms": 30.5, "members_kms": 4.05})
    text = v["explanation"]
    for number in ("4.19", "30.50", "4.05", "3.37", "77 stars"):
        assert number in text, text
    assert "membership" in text and "binary orbits marginalised" in text
    assert v["dispersion_steps"]["closed_form_kms"] == 4.19


NATURE = {
    "tides": {
        "milky_way": {"model": "toy", "galactocentric_distance_kpc": 60.0,
                      "enclosed_mass_msun": 5e11},
        "nfw": {"jacobi_radius_pc": _q(812.0, 700.0, 950.0),
                "r_half_over_jacobi": _q(0.071, 0.06, 0.08)},
    },
    "survival": {
        "relaxation_time_gyr": _q(310.0, 250.0, 380.0),
        "dissolution_time_gyr": _q(2.0e3, 1.5e3, 2.6e3),
        "p_survives_age": 0.97,
    },
    "metallicity": {
        "mean_feh": _q(-2.31, -2.40, -2.22),
        "spread_dex": _q(0.05, 0.02, 0.09),
        "resolved": False,
        "spread_upper_95_dex": 0.14,
    },
}  # fmt: skip


def test_nature_beside_the_verdict_in_terminal_and_page():
    s = _summary()
    s["verdict"] = build_verdict(s, (0.0, 1.0))
    s["nature"] = copy.deepcopy(NATURE)
    text = "\n".join(nature_lines(s))
    page = Page(verdict_block(s))
    for words in ("Jacobi radius 812 (+138/-112) pc", "r_1/2 / r_J = 0.071", "toy",
                  "P(survives its age) = 0.97", "relaxation time 310", "mean [Fe/H] -2.31",
                  "spread NOT RESOLVED: < 0.14 dex (95%)"):  # fmt: skip
        assert words in text, text
        assert words in page.text_of("nature"), page.text_of("nature")
    s["nature"]["metallicity"]["resolved"] = True
    assert "spread 0.05 (+0.04/-0.03) dex, resolved" in "\n".join(nature_lines(s))
    # without the section nothing is printed, and the verdict block still stands
    del s["nature"]
    assert nature_lines(s) == [] and "nature" not in Page(verdict_block(s)).by_id


def test_the_verdict_rests_on_the_summary_numbers(run):
    s = run["summary"]
    v = s["verdict"]
    name = v["model"]
    assert name == "nfw"
    m, ref = s["models"][name], s["models"][STARS]
    d = s["dispersion"]
    assert v["dispersion"]["resolved"] == d["resolved"]
    assert v["dispersion"]["median_kms"] == d["sigma_median_kms"]
    assert v["dispersion"]["upper95_kms"] == d["sigma_upper95_kms"]
    assert v["v_sys_kms"]["median"] == m["parameters"]["v_sys"]["median"]
    ml = m["derived"]["ml_half_v"]
    assert v["ml_half_v"]["median"] == ml["median"]
    assert v["ml_half_v"]["lower95"] == m["derived"]["ml_half_v_lower95"]
    # the one-sided 95% bound (5th percentile) lies between the 2.5th and 16th percentiles
    assert ml["p2.5"] <= v["ml_half_v"]["lower95"] <= ml["p16"]
    c = m["vs_stars_only"]
    assert v["bayes_factor"]["ln_bayes_factor"] == c["ln_bayes_factor"]
    two = 2 * abs(c["ln_bayes_factor"])  # Kass & Raftery (1995, JASA 90, 773, sec. 3.2)
    want = "none" if two < 2 else "positive" if two < 6 else "strong" if two < 10 else "very strong"
    assert v["bayes_factor"]["grade"] == want
    assert v["stars_only_binary_fraction"]["median"] == ref["binary_fraction"]["median"]
    assert v["dispersion_steps"]["closed_form_kms"] == s["estimators"]["sigma_los_kms"]
    assert v["converged"] == (m["converged"] and ref["converged"])
    # the text quotes the same numbers
    assert f"sigma_los < {d['sigma_upper95_kms']:.2f} km/s" in v["text"]  # unresolved run
    assert "cannot tell" in v["reading"]
    assert f"{m['parameters']['v_sys']['median']:.2f}" in v["text"]


def test_the_terminal_prints_the_verdict_first(run):
    s = run["summary"]
    lines = format_summary(s, run["dir"]).splitlines()
    if not s["verdict"]["converged"]:  # said loudly first
        assert lines.pop(1).startswith("*** NOT CONVERGED: ")
    assert lines[0].startswith("====") and lines[1] == s["verdict"]["text"].splitlines()[0]
    block = "\n".join(lines[: lines.index(lines[0], 1) + 1])
    for line in s["verdict"]["text"].splitlines()[1:]:
        assert f"  {line}" in block
    assert any(ln.startswith("closed-form global dispersion") for ln in lines)


def test_page_shows_the_verdict_first(run):
    page, html = run["page"], run["html"]
    for line in run["summary"]["verdict"]["text"].splitlines():
        assert " ".join(line.split()) in page.text_of("verdict-block")
    order = ["sec-verdict", "sec-models", "sec-figures", "sec-comparison", "sec-diagnostics",
             "sec-inputs"]  # fmt: skip
    at = [html.index(f'<section id="{k}">') for k in order]
    assert at == sorted(at)
    assert html.index('id="verdict-block"') < html.index("<nav>")
    # the priors the Bayes factor depends on, from the spec (nfw.toml's m200 range)
    prior = page.text_of("prior-nfw-m200")
    assert "log-uniform" in prior and "low=100000" in prior and "high=1e+11" in prior


def test_summary_ecsv_has_a_unit_per_row(run):
    t = Table.read(run["dir"] / "summary.ecsv", format="ascii.ecsv")
    assert "unit" in t.colnames
    units = {
        (r["model"], r["quantity"]): ("" if np.ma.is_masked(r["unit"]) else r["unit"]) for r in t
    }
    for unit in units.values():
        u.Unit(unit)  # every one parses as an astropy unit
    assert units[("nfw", "parameters.v_sys")] == "km / s"
    assert u.Unit(units[("nfw", "derived.m_half_msun")]) == u.Msun
    assert u.Unit(units[("nfw", "derived.log10_j.0.5")]) == u.dex(u.GeV**2 / u.cm**5)
    assert u.Unit(units[("nfw", "parameters.m200")]) == u.Msun  # the spec's own unit
    assert units[("nfw", "parameters.f_binary")] == ""
    for (model, _), unit in units.items():  # no estimator rows when the dispersion is unresolved
        assert model != "estimators" or u.Unit(unit) == u.Msun
    assert quantity_unit("estimators", "wolf2010_msun", run["summary"]) == "solMass"


def test_members_ecsv_positions_velocities_and_epoch_chi2(run, tmp_path):
    # the run's own table: the columns and their units
    t = Table.read(run["dir"] / "members.ecsv", format="ascii.ecsv")
    for col, unit in (("ra", u.deg), ("dec", u.deg), ("xi", u.deg), ("eta", u.deg),
                      ("v_mean_kms", u.km / u.s), ("v_mean_err_kms", u.km / u.s),
                      ("radius_pc", u.pc)):  # fmt: skip
        assert t[col].unit == unit, col
    for col in ("epoch_chi2", "epoch_chi2_dof", "epoch_chi2_p"):
        assert col in t.colnames
    assert "scipy.stats.chi2.sf" in t.meta["note"]
    # a catalogue with repeated epochs: chi2 and its p-value recomputed from the rows
    rng = np.random.default_rng(4)
    n = 12
    rows = Table()
    rows["id"] = np.repeat([f"s{i}" for i in range(n)], 3)
    rows["ra"] = np.repeat(DWARF["ra_deg"] + rng.uniform(-0.05, 0.05, n), 3)
    rows["dec"] = np.repeat(DWARF["dec_deg"] + rng.uniform(-0.05, 0.05, n), 3)
    rows["mjd"] = np.tile([60000.0, 60100.0, 60400.0], n)
    rows["vlos"] = 50 + rng.normal(0, 4, 3 * n)
    rows["vlos_err"] = rng.uniform(0.5, 2.0, 3 * n)
    rows.write(tmp_path / "epochs.ecsv", format="ascii.ecsv")
    sat = read_satellite(write_satellite(tmp_path / "sat.toml", DWARF))
    stars = read_catalogue(tmp_path / "epochs.ecsv", sat)
    res = {"member_prob": None, "binary_prob": None, "samples": {}, "epochs": None}
    tab = members_table(stars, {STARS: res}, [STARS], sat)
    for i, sid in enumerate(tab["id"]):
        sel = rows[rows["id"] == sid]
        w = 1 / np.asarray(sel["vlos_err"]) ** 2
        mean = np.sum(w * sel["vlos"]) / np.sum(w)
        chi2 = np.sum(w * (sel["vlos"] - mean) ** 2)
        assert tab["v_mean_kms"][i] == pytest.approx(mean, rel=1e-12)
        assert tab["v_mean_err_kms"][i] == pytest.approx(np.sum(w) ** -0.5, rel=1e-12)
        assert tab["epoch_chi2"][i] == pytest.approx(chi2, rel=1e-9, abs=1e-12)
        assert tab["epoch_chi2_dof"][i] == 2
        assert tab["epoch_chi2_p"][i] == pytest.approx(stats.chi2.sf(chi2, 2), rel=1e-9)
    # xi, eta: the zenithal equidistant (FITS ARC) projection about the centre, astropy.wcs
    # (Calabretta & Greisen 2002, A&A 395, 1077, sec. 5.1.4)
    w = WCS(naxis=2)
    w.wcs.ctype = ["RA---ARC", "DEC--ARC"]
    w.wcs.crval = [DWARF["ra_deg"], DWARF["dec_deg"]]
    w.wcs.crpix = [1.0, 1.0]  # FITS pixels count from 1: the centre is 0-based pixel (0, 0)
    w.wcs.cdelt = [-1.0, 1.0]  # pixel x grows to the west: xi (east) = -x
    x, y = w.wcs_world2pix(np.asarray(tab["ra"]), np.asarray(tab["dec"]), 0)
    assert np.allclose(tab["xi"], -x, atol=1e-9) and np.allclose(tab["eta"], y, atol=1e-9)


def test_non_convergence_said_once_and_marked_where_numbers_are(run, tmp_path):
    s = copy.deepcopy(run["summary"])
    s["models"]["nfw"]["converged"] = False
    s["models"]["nfw"]["problems"] = ["r-hat 1.2 >= 1.01 (m200)"]
    s["models"][STARS]["converged"] = True
    s["verdict"] = build_verdict(s, (0.0, 1.0))
    s["warnings"] = s["warnings"] + ["model nfw NOT CONVERGED: r-hat 1.2 >= 1.01 (m200)"]
    page = Page(write_report(copy_run(run, tmp_path / "nc"), s))
    loud = page.text.count("NOT CONVERGE")
    assert loud == page.text_of("banner-nc").count("NOT CONVERGE") == 2  # head + the model
    assert "r-hat 1.2 >= 1.01 (m200)" in page.text_of("banner-nc-nfw")
    for ident in ("headline-nfw", "model-nfw", "verdict-nfw", "diag-nfw", "verdict-block"):
        assert "not converged" in page.text_of(ident), ident
    assert "not converged" not in page.text_of("headline-stars-only")


def test_dispersion_step_of_all_stars_against_scipy(run):
    """The first step (every star alike, no binary term) is the posterior median of a constant
    sigma under v_i ~ N(v_sys, sigma^2 + e_i^2) (common practice) with a uniform prior on
    [0, max(5, 3 x the velocities' spread)] km/s (the program's grid), here by scipy quadrature
    and root finding instead of the program's 801-point grid (measured: 1e-5 km/s apart)."""
    from scipy import integrate, optimize

    s = run["summary"]
    t = Table.read(run["dir"] / "members.ecsv", format="ascii.ecsv")
    v, e = np.asarray(t["v_mean_kms"]), np.asarray(t["v_mean_err_kms"])
    v_sys = s["models"]["nfw"]["parameters"]["v_sys"]["median"]
    top = max(5.0, 3.0 * np.std(v))

    def log_like(sig):
        return np.sum(stats.norm.logpdf(v, v_sys, np.sqrt(sig**2 + e**2)))

    peak = max(log_like(x) for x in np.linspace(0, top, 201))

    def mass(b):
        return integrate.quad(lambda x: np.exp(log_like(x) - peak), 0, b, epsabs=0, epsrel=1e-10)[0]

    total = mass(top)
    median = optimize.brentq(lambda b: mass(b) - 0.5 * total, 0, top, xtol=1e-8)
    assert s["verdict"]["dispersion_steps"]["all_stars_kms"] == pytest.approx(median, abs=1e-3)
