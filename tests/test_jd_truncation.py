"""J and D truncated at each posterior draw's own Jacobi radius (the default of every fit).

1. The per-draw product function (halo.results.derived.derive with a tidal field): its r_J
   against scipy's root of the Jacobi condition r^3 = G M(<r) / (Omega^2 - d2Phi/dr2)
   (Binney & Tremaine 2008 section 8.3; King 1962) with the closed-form NFW mass
   (Navarro, Frenk & White 1996) and Plummer mass (Plummer 1911), and its truncated J and D
   against an independent scipy nested quadrature of rho^2 (rho) over the exact cone, rho = 0
   beyond r_J (the definition J = Int dOmega Int_los rho^2 dl, common practice).
2. The product path: a tiny `halo fit` and `halo export` (CLI): summary.json, jd_factors.ecsv,
   the draws table and the FITS headers carry the truncated values, the untruncated ones beside
   them and the statement; nature.tides agrees with the derived numbers.
3. --no-tidal-truncation: the pipeline on the same posterior (reused, no sampling) gives the
   untruncated values of run 2 as its reported ones, and says so.
"""

import contextlib
import io
import json
import math

import numpy as np
import pytest
import xarray as xr
from astropy.io import fits
from astropy.table import Table
from export_setup import SAT, nfw_posterior
from fit_setup import DWARF, NO_EXTRAS, fit_command, tiny_chains, write_satellite
from scipy import integrate, optimize

from halo.cli.app import main
from halo.core.constants import DEG, MSUN2_KPC5_TO_GEV2_CM5, MSUN_KPC2_TO_GEV_CM2, G
from halo.core.vocabulary import STANDARD_ANGLES, angle_keys
from halo.inputs.build import build_mass_model
from halo.inputs.catalogue import read_catalogue
from halo.inputs.satellite import parse_satellite
from halo.inputs.spec import load_spec
from halo.mock.catalogue import make_mock
from halo.physics.cosmology import rho_crit
from halo.physics.dark import NFW
from halo.pipeline.fit import fit
from halo.results.derived import derive, parameter_values

R_TARGET = 0.3  # kpc: the Jacobi radius the tidal field of test 1 is chosen to give draw 0


def _analytic_mass(rho_s, r_s, m_star, a):
    """Closed-form NFW (NFW 1996) plus Plummer (Plummer 1911) enclosed mass [Msun]."""

    def mass(r):
        x = r / r_s
        nfw = 4 * math.pi * rho_s * r_s**3 * (math.log1p(x) - x / (1 + x))
        return nfw + m_star * r**3 / (r * r + a * a) ** 1.5

    return mass


def nfw_cone_reference(rho_s, r_s, d, theta_deg, r_cut, power):
    """Int_cone dOmega Int_los rho^power dl [Msun^power kpc^(2 - 3 power)] of an NFW halo
    (closed-form density, NFW 1996) with rho = 0 beyond r_cut, by scipy nested quadrature: the
    line of sight at angle t from the centre has impact parameter b = d sin t and meets the
    sphere r_cut over |s| <= sqrt(r_cut^2 - b^2) around its closest point (s = l - d cos t)."""

    def rho(r):
        x = r / r_s
        return rho_s / (x * (1 + x) ** 2)

    def los(t):
        b = d * math.sin(t)
        if b >= r_cut:
            return 0.0
        half = math.sqrt(r_cut * r_cut - b * b)
        f = lambda s: rho(math.hypot(b, s)) ** power  # noqa: E731
        pts = [p for p in (b, 10 * b) if p < half]
        return 2 * integrate.quad(f, 0.0, half, points=pts or None, limit=400, epsrel=1e-12)[0]

    outer = lambda t: 2 * math.pi * math.sin(t) * los(t)  # noqa: E731
    t_max = theta_deg * DEG
    t_edge = math.asin(min(1.0, r_cut / d))
    val, _ = integrate.quad(outer, 0.0, min(t_max, t_edge), limit=400, epsabs=0.0, epsrel=1e-11)
    return val


def _draws(n=3):
    post = nfw_posterior()
    return {k: np.asarray(v).ravel()[:n] for k, v in post.items()}


def test_truncated_j_and_d_of_a_draw_against_scipy_quadrature():
    sat, spec, samples = parse_satellite(SAT), load_spec("nfw"), _draws()
    vals = {k: v[0] for k, v in parameter_values(spec, samples).items()}
    r_e, d = samples["r_e_kpc"][0], samples["distance"][0]
    _, dark = build_mass_model(spec, vals, sat.light(r_e), rho_crit())
    rho_s, r_s = float(dark.rho_s), float(dark.r_s)
    mass = _analytic_mass(rho_s, r_s, vals["stellar_mass"], r_e)  # Plummer a = R_e
    den = G * mass(R_TARGET) / R_TARGET**3  # Omega^2 - d2Phi/dr2 putting r_J at R_TARGET
    tides = {"denominator": np.full(3, den), "truncate": True}
    der = derive(spec, sat, samples, sigma_angles_deg=[0.01], tides=tides)
    # r_J: scipy brentq on the Jacobi condition with the closed-form masses
    ref_rj = optimize.brentq(lambda r: G * mass(r) / r**3 - den, 1e-4, 50.0, xtol=1e-14)
    assert ref_rj == pytest.approx(R_TARGET, rel=1e-10)
    assert der["r_jacobi_pc"][0] * 1e-3 == pytest.approx(ref_rj, rel=1e-9)
    # 0.5 deg at ~60 kpc reaches 0.52 kpc > r_J: the cone's edge is cut there; at every angle the
    # halo in front of and behind r_J along the line of sight is cut. Measured agreement with the
    # scipy reference: 1.6e-14 relative (J and D, 0.1-0.5 deg); asserted to 1e-10 dex
    keys = angle_keys()
    for i, theta in enumerate(STANDARD_ANGLES):
        j_ref = nfw_cone_reference(rho_s, r_s, d, theta, ref_rj, power=2)
        d_ref = nfw_cone_reference(rho_s, r_s, d, theta, ref_rj, power=1)
        assert der["log10_j"][0, i] == pytest.approx(
            math.log10(j_ref * MSUN2_KPC5_TO_GEV2_CM5), abs=1e-10
        ), keys[i]
        assert der["log10_d"][0, i] == pytest.approx(
            math.log10(d_ref * MSUN_KPC2_TO_GEV_CM2), abs=1e-10
        ), keys[i]
    cut, full = der["log10_d"][0, 2], der["log10_d_untruncated"][0, 2]
    assert cut < full - 0.05  # D(0.5 deg) loses the halo beyond 0.3 kpc
    assert np.all(der["log10_j"] <= der["log10_j_untruncated"] + 1e-12)


def test_truncation_off_or_without_field_keeps_the_untruncated_values():
    sat, spec, samples = parse_satellite(SAT), load_spec("nfw"), _draws()
    plain = derive(spec, sat, samples, sigma_angles_deg=[0.01])
    off = derive(
        spec, sat, samples, sigma_angles_deg=[0.01],
        tides={"denominator": np.full(3, 1e3), "truncate": False},
    )  # fmt: skip
    for der in (plain, off):
        np.testing.assert_array_equal(der["log10_j"], der["log10_j_untruncated"])
        np.testing.assert_array_equal(der["log10_d"], der["log10_d_untruncated"])
    np.testing.assert_allclose(off["log10_j"], plain["log10_j"], rtol=0, atol=1e-12)
    assert "r_jacobi_pc" in off and "r_jacobi_pc" not in plain
    # a field that compresses (denominator < 0) sets no tidal limit: that draw stays whole
    none = derive(
        spec, sat, samples, sigma_angles_deg=[0.01],
        tides={"denominator": np.full(3, -1.0), "truncate": True},
    )  # fmt: skip
    assert np.all(np.isnan(none["r_jacobi_pc"]))
    np.testing.assert_allclose(none["log10_j"], plain["log10_j"], rtol=0, atol=1e-12)


# ---- the product path: halo fit, halo export, and the same posterior untruncated --------------

_RUN = {}


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    if _RUN:
        return _RUN
    root = tmp_path_factory.mktemp("trunc")
    sat_file = write_satellite(root / "sat.toml", DWARF)
    sat = parse_satellite(DWARF)
    mock = make_mock(sat, NFW.from_m200_c200(1e9, 20.0), n_stars=24, seed=3)
    cat = root / "cat.ecsv"
    mock.table.write(cat, format="ascii.ecsv")
    on = root / "on"
    args = fit_command(cat, sat_file, on, "nfw") + tiny_chains(2, 60, 60) + NO_EXTRAS
    assert main(args + ["--quiet"]) == 0
    exp = root / "exp"
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        assert main(["export", str(on), "--out", str(exp), "--template-draws", "8"]) == 0
    off = root / "off"
    settings = _settings(json.loads((on / "summary.json").read_text()))
    stars = read_catalogue(cat, sat)
    fit(stars, sat, off, ["nfw"], settings, reuse={"nfw": on, "stars-only": on})
    _RUN.update(on=on, exp=exp, off=off, export_text=printed.getvalue())
    return _RUN


def _settings(summary):
    from halo.pipeline.settings import FitSettings

    s = summary["settings"]
    return FitSettings(
        chains=s["chains"], warmup=s["warmup"], draws=s["draws"], seed=s["seed"],
        progress=False, binaries=False, foreground=False, tidal_truncation=False,
    )  # fmt: skip


def _summary(folder):
    return json.loads((folder / "summary.json").read_text())


def test_fit_reports_truncated_j_beside_untruncated(runs):
    s = _summary(runs["on"])
    m = s["models"]["nfw"]
    der, trunc = m["derived"], m["jd_truncation"]
    assert trunc["truncated"] is True and trunc["method"] == "jacobi"
    assert "Jacobi radius" in trunc["statement"] and trunc["milky_way_model"] in trunc["statement"]
    assert s["jd_conventions"]["halo_truncation"] == trunc["statement"]
    assert set(der["r_jacobi_pc"]) >= {"median", "p16", "p84"}
    for kind in ("log10_j", "log10_d"):
        for key in angle_keys():
            cut, full = der[kind][key], der[f"{kind}_untruncated"][key]
            assert set(cut) == set(full)
            for q in ("p2.5", "p16", "median", "p84", "p97.5"):
                assert cut[q] <= full[q] + 1e-12, (kind, key, q)
    # nature.tides shows the same J numbers (the fit's per-draw values, same pairing)
    t = s["nature"]["tides"]["nfw"]
    assert t["log10_j"] == der["log10_j"] and t["log10_d_untruncated"] == der["log10_d_untruncated"]
    # ... and the same r_J (every draw, the same pairing with the tidal field)
    for q, v in der["r_jacobi_pc"].items():
        assert t["jacobi_radius_pc"][q] == pytest.approx(v, rel=1e-9), q
    assert t["jd_truncation"] == trunc["statement"]


def test_fit_tables_and_report_state_the_truncation(runs):
    on = runs["on"]
    table = Table.read(on / "jd_factors.ecsv", format="ascii.ecsv")
    for col in ("log10_j_median", "log10_j_untruncated_median", "log10_d_untruncated_upper95"):
        assert col in table.colnames
    assert np.all(table["log10_j_median"] <= table["log10_j_untruncated_median"] + 1e-12)
    assert "Jacobi radius" in table.meta["halo_truncation"]
    assert np.all(table["jd_truncated"])
    # the header stays short with the truncation statement in it (test_jd_table_contract.py)
    header = [ln for ln in (on / "jd_factors.ecsv").read_text().splitlines() if ln[:1] == "#"]
    assert len(header[header.index("# meta: !!omap") : -1]) <= 16
    summ = Table.read(on / "summary.ecsv", format="ascii.ecsv")
    quantities = set(summ["quantity"])
    assert {"derived.r_jacobi_pc", "derived.log10_j_untruncated.0.5"} <= quantities
    assert "Jacobi radius" in summ.meta["jd_conventions"]["halo_truncation"]
    html = (on / "report.html").read_text()
    assert 'id="nfw-jd-truncation"' in html and "untruncated" in html


def test_export_cuts_at_the_fits_jacobi_radius(runs):
    on, exp = runs["on"], runs["exp"]
    fit_t = Table.read(on / "jd_factors.ecsv", format="ascii.ecsv")
    exp_t = Table.read(exp / "jd_factors.ecsv", format="ascii.ecsv")
    for label in angle_keys():
        a = fit_t[(fit_t["model"] == "nfw") & (fit_t["angle_label"] == label)][0]
        b = exp_t[(exp_t["model"] == "nfw") & (exp_t["angle_label"] == label)][0]
        for col in ("log10_j_median", "log10_d_p16", "log10_j_untruncated_median"):
            assert b[col] == pytest.approx(a[col], abs=1e-9), (label, col)
    draws = Table.read(exp / "nfw_draws.ecsv", format="ascii.ecsv")
    # posterior.nc's derived group holds the fit's r_J and J per draw: the export cut there
    with xr.open_datatree(on / "nfw" / "posterior.nc") as tree:
        group = tree["derived"].to_dataset()
        r_pc = np.asarray(group["r_jacobi_pc"].values).ravel()
        j05 = np.asarray(group["log10_j"].sel(angle="0.5").values).ravel()
    np.testing.assert_allclose(draws["r_cut_pc"], r_pc, rtol=1e-12)
    np.testing.assert_allclose(draws["log10_j_0_5"], j05, rtol=0, atol=1e-9)
    assert {"r_cut_pc", "log10_j_0_5", "log10_j_untruncated_0_5"} <= set(draws.colnames)
    assert np.all(draws["log10_d_0_5"] <= draws["log10_d_untruncated_0_5"] + 1e-12)
    assert "nfw: log10 J(0.5 deg)" in runs["export_text"]
    assert "truncated at r_J" in runs["export_text"]
    for path in (exp / "nfw_dj_domega.fits", exp / "nfw_dd_domega.fits"):
        hdr = fits.getheader(path)
        assert hdr["TRUNC"] == "JACOBI" and hdr["TRUNCATD"] is True
        assert 0.0 <= hdr["INTERPJ"] < 0.01  # the J- (D-)weighted interpolation error
        assert "Jacobi radius" in " ".join(str(c) for c in hdr["COMMENT"])
    # the whole halo of the J map is the halo inside r_J: its cone is arcsin(r_J / d)
    hdr = fits.getheader(exp / "nfw_dj_domega.fits")
    r_j = np.median(draws["r_cut_pc"]) * 1e-3
    assert hdr["WHOLEANG"] == pytest.approx(math.asin(r_j / DWARF["distance_kpc"]) / DEG, rel=0.3)


def test_no_tidal_truncation_gives_the_untruncated_values(runs):
    on, off = _summary(runs["on"]), _summary(runs["off"])
    m_on, m_off = on["models"]["nfw"], off["models"]["nfw"]
    assert m_off["jd_truncation"]["truncated"] is False
    assert "--no-tidal-truncation" in m_off["jd_truncation"]["statement"]
    assert "untruncated" in off["jd_conventions"]["halo_truncation"]
    assert off["settings"]["tidal_truncation"] is False
    for kind in ("log10_j", "log10_d"):
        for key in angle_keys():
            reported, before = (
                m_off["derived"][kind][key],
                m_on["derived"][f"{kind}_untruncated"][key],
            )
            assert reported == pytest.approx(before, abs=1e-10)
            assert m_off["derived"][f"{kind}_untruncated"][key] == reported
    table = Table.read(runs["off"] / "jd_factors.ecsv", format="ascii.ecsv")
    assert not np.any(table["jd_truncated"])
    assert "untruncated" in table.meta["halo_truncation"]
    np.testing.assert_array_equal(table["log10_j_median"], table["log10_j_untruncated_median"])


def test_cli_flag_reaches_the_fit_settings(tmp_path, monkeypatch):
    import halo.pipeline.fit as fit_module

    seen = {}

    def fake_fit(stars, sat, out_dir, models, settings, **kw):
        seen["settings"] = settings
        raise SystemExit(0)

    monkeypatch.setattr(fit_module, "fit", fake_fit)
    sat_file = write_satellite(tmp_path / "sat.toml", DWARF)
    mock = make_mock(parse_satellite(DWARF), None, n_stars=5, seed=1)
    cat = tmp_path / "cat.ecsv"
    mock.table.write(cat, format="ascii.ecsv")
    for flag, expect in (("--no-tidal-truncation", False), ("--tidal-truncation", True)):
        with pytest.raises(SystemExit):
            main(fit_command(cat, sat_file, tmp_path / f"o{expect}", "nfw") + [flag, "--quiet"])
        assert seen["settings"].tidal_truncation is expect


def test_statement_without_a_tidal_field_or_switched_off():
    from halo.results.truncation import truncation_entry

    reason = "no tidal field could be computed (test)"
    none = truncation_entry({"site": None, "reason": reason}, True)
    assert none["truncated"] is False and reason in none["statement"]
    assert "untruncated" in none["statement"]
    off = truncation_entry({"site": {}, "entry": {}}, False)
    assert off["truncated"] is False and "--no-tidal-truncation" in off["statement"]
