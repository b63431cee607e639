"""summary.json ``nature`` (halo.results.nature): the issue's two survival cases on stars-only
posterior-like draws (no MCMC), J and D truncated at the Jacobi radius, and the keys through
`halo fit`.

The cases: a 20-star (~15 Msun), few-pc system at 12 kpc aged 11 Gyr dissolves by evaporation
within a Gyr (Spitzer 1987 relaxation time, eq. 2-63; evaporation at xi_e = 0.045 per t_rh for a
tidally limited system, Henon 1961 [memory]); a 3e5 Msun globular cluster at 15 kpc lives tens of
Gyr (Baumgardt & Makino 2003, eq. 7 [memory]) - globular clusters of that mass and distance are
observed to be ~12 Gyr old (common practice).
"""

import json
from types import SimpleNamespace

import numpy as np
import pytest
from fit_setup import CLUSTER, NO_EXTRAS, cluster_mock, fit_command, tiny_chains, write_satellite

from halo.cli.app import main
from halo.core.constants import G
from halo.core.vocabulary import STARS_ONLY
from halo.inputs.satellite import parse_satellite
from halo.inputs.spec import load_spec
from halo.pipeline.settings import FitSettings
from halo.results.derived import derive
from halo.results.nature import nature_section
from halo.results.truncation import model_tides, shared_tides, truncation_entry

Q_KEYS = {"median", "p16", "p84", "p2.5", "p97.5", "mean", "std"}


def _satellite(mass, r_half_pc, rg, age, **extra):
    return parse_satellite(
        dict(
            name="Case",
            ra_deg=200.0,
            dec_deg=-30.0,
            distance_kpc=11.0,
            distance_err_kpc=0.5,
            r_half_pc=r_half_pc,
            stellar_mass_msun=mass,
            stellar_mass_err_msun=0.2 * mass,
            galactocentric_distance_kpc=rg,
            age_gyr=age,
            age_err_gyr=1.0,
            **extra,
        )
    )


def _draws(sat, n=400, seed=1, **params):
    """Posterior-like draws: the satellite's values with their errors, plus model parameters."""
    rng = np.random.default_rng(seed)
    d = sat.distance_kpc + sat.distance_err_kpc * rng.standard_normal(n)
    out = {
        "distance": d,
        "m_star": sat.stellar_mass_msun * np.exp(0.2 * rng.standard_normal(n)),
        "r_e_kpc": sat.r_half_circ_kpc * np.exp(0.1 * rng.standard_normal(n)) * d / 11.0,
        "v_sys": 60.0 + rng.standard_normal(n),
        "beta": rng.uniform(-0.5, 0.5, n),
    }
    out.update({k: v * np.exp(0.1 * rng.standard_normal(n)) for k, v in params.items()})
    return out


def _stars(sat, n=20):
    r_deg = np.linspace(0.2, 3.0, n) * sat.r_half_circ_kpc / sat.distance_kpc * 57.2958
    return SimpleNamespace(radius_deg=r_deg, feh=None)


def _nature(sat, models, with_derived=False):
    """The nature section of posterior-like draws; ``with_derived``: first the fit's derived
    quantities (J and D truncated at each draw's r_J, halo.results.truncation), as a fit does."""
    results = {name: {"samples": samples, "member_prob": None} for name, samples in models.items()}
    specs = {name: load_spec(name) for name in models}
    if not with_derived:
        return nature_section(_stars(sat), sat, results, specs, 0)
    ctx = {}
    tides = shared_tides(ctx, sat, models[STARS_ONLY], FitSettings(progress=False))
    for name, res in results.items():
        n = len(res["samples"]["distance"])
        per_draw, pair = model_tides(tides, name, n, True)
        der = derive(specs[name], sat, res["samples"], sigma_angles_deg=[0.01], tides=per_draw)
        der["tidal_pair"] = pair
        res.update(derived=der, jd_truncation=truncation_entry(tides, True, der))
    return nature_section(_stars(sat), sat, results, specs, 0, tides=tides)


def test_twenty_stars_at_12_kpc_would_not_survive():
    sat = _satellite(15.0, 3.0, 12.0, 11.0)
    nat = _nature(sat, {STARS_ONLY: _draws(sat)})
    s = nat["survival"]
    assert s["p_survives_age"] < 0.01, s
    assert s["method"]["evaporation"] == 1.0  # below every N-body calibration
    assert "below every N-body calibration" in s["method_note"]
    assert s["dissolution_time_gyr"]["p97.5"] < 11.0
    t = nat["tides"][STARS_ONLY]
    assert set(t["jacobi_radius_pc"]) == Q_KEYS and set(t["r_half_over_jacobi"]) == Q_KEYS
    # r_J ~ R (m / 2M)^(1/3) ~ 4-5 pc at 12 kpc (flat rotation curve, B&T 2008 eq. 8.108 [memory])
    assert 3.0 < t["jacobi_radius_pc"]["median"] < 6.0
    mw = nat["tides"]["milky_way"]
    assert mw["model"] == "bovy2015" and mw["galactocentric_distance_kpc"] == pytest.approx(12.0)
    # Bovy 2015: M(<12 kpc) ~ v_c^2 R / G with v_c ~ 210 km/s (galpy, tests/test_milky_way.py)
    assert 1.0e11 < mw["enclosed_mass_msun"] < 1.3e11
    # the flat 220 km/s model beside it: M = v_c^2 R / G = 1.35e11 Msun, r_J within a few per cent
    iso = mw["other_models"]["isothermal220"]
    assert iso["enclosed_mass_msun"] == pytest.approx(220.0**2 * 12.0 / G, rel=1e-9)
    assert 0.9 < iso["jacobi_radius_ratio"] < 1.1
    assert "provisional" in nat["caution"] and "would not survive" in s["reading"]


def test_globular_cluster_at_15_kpc_survives():
    sat = _satellite(3e5, 4.0, 15.0, 12.0)
    nat = _nature(sat, {STARS_ONLY: _draws(sat)})
    s = nat["survival"]
    assert s["p_survives_age"] > 0.95, s
    assert s["method"]["baumgardt_makino_2003"] == 1.0
    assert s["dissolution_time_gyr"]["p2.5"] > 20.0
    assert nat["tides"][STARS_ONLY]["r_half_over_jacobi"]["median"] < 0.1


def test_orbit_and_truncated_j_of_a_dark_model():
    # with a proper motion the tides are judged at pericentre, which lies inside today's distance;
    # J and D of the halo truncated at r_J fall below the untruncated values, most at wide angles
    sat = _satellite(
        1e4,
        30.0,
        40.0,
        12.0,
        pm_ra_cosdec_masyr=0.3,
        pm_dec_masyr=-0.6,
        pm_ra_cosdec_err_masyr=0.05,
        pm_dec_err_masyr=0.05,
    )
    nfw = _draws(sat, m200=1e8, c200=15.0)
    nat = _nature(sat, {STARS_ONLY: _draws(sat, seed=2), "nfw": nfw}, with_derived=True)
    mw = nat["tides"]["milky_way"]
    assert "pericentre" in mw["judged_at"]
    assert mw["pericentre_kpc"]["p97.5"] <= mw["present_distance_kpc"]["p2.5"] + 1e-9
    t = nat["tides"]["nfw"]
    for key in ("0.1", "0.5"):
        cut, full = t["log10_j"][key]["median"], t["log10_j_untruncated"][key]["median"]
        assert cut <= full + 1e-9
    assert t["log10_d"]["0.5"]["median"] < t["log10_d_untruncated"]["0.5"]["median"]
    assert "truncated at each posterior draw's own Jacobi radius" in t["jd_truncation"]
    # the halo is far more massive inside r_J than the stars: its r_J is larger
    assert t["jacobi_radius_pc"]["median"] > nat["tides"][STARS_ONLY]["jacobi_radius_pc"]["median"]


def test_halo_fit_writes_the_nature_section(tmp_path):
    sat_dict = {**CLUSTER, "age_gyr": 12.0, "age_err_gyr": 1.0, "galactocentric_distance_kpc": 20.0}
    sat_file = write_satellite(tmp_path / "sat.toml", sat_dict)
    mock = cluster_mock(parse_satellite(sat_dict), 40, 7)
    cat = tmp_path / "cat.ecsv"
    mock.table.write(cat, format="ascii.ecsv")
    out = tmp_path / "run"
    args = fit_command(cat, sat_file, out, "stars-only") + tiny_chains(2, 100, 100) + NO_EXTRAS
    assert main(args) == 0
    nat = json.loads((out / "summary.json").read_text())["nature"]
    assert {"tides", "survival", "caution"} <= set(nat)
    assert set(nat["tides"]) == {"milky_way", STARS_ONLY}
    mw = nat["tides"]["milky_way"]
    assert {"model", "galactocentric_distance_kpc", "enclosed_mass_msun"} <= set(mw)
    assert mw["galactocentric_distance_kpc"] == pytest.approx(20.0)
    t = nat["tides"][STARS_ONLY]
    assert set(t["jacobi_radius_pc"]) == Q_KEYS and set(t["r_half_over_jacobi"]) == Q_KEYS
    s = nat["survival"]
    assert set(s["relaxation_time_gyr"]) == Q_KEYS and set(s["dissolution_time_gyr"]) == Q_KEYS
    # 2e4 Msun in ~8 pc at 20 kpc (Baumgardt & Makino 2003: tens of Gyr): survives
    assert s["p_survives_age"] > 0.9
    assert "metallicity" not in nat  # no [Fe/H] in the catalogue


@pytest.mark.parametrize(
    "extra, key",
    [
        ({"pm_ra_cosdec_masyr": 0.3}, "pm_ra_cosdec_masyr' needs 'pm_dec_masyr"),
        ({"pm_dec_masyr": 0.3}, "pm_dec_masyr' needs 'pm_ra_cosdec_masyr"),
        ({"pm_ra_cosdec_err_masyr": 0.1}, "pm_ra_cosdec_err_masyr' needs"),
        ({"age_err_gyr": 1.0}, "age_err_gyr' needs 'age_gyr"),
        ({"pm_ra_cosdec_masyr": 300.0, "pm_dec_masyr": 0.0}, "pm_ra_cosdec_masyr' must be between"),
        ({"age_gyr": 10.0, "age_err_gyr": -1.0}, "age_err_gyr' must be non-negative"),
        ({"milky_way_model": "spiral9"}, "milky_way_model' must be one of bovy2015"),
    ],
)
def test_satellite_keys_of_the_orbit_are_checked(tmp_path, capsys, extra, key):
    sat_file = write_satellite(tmp_path / "sat.toml", {**CLUSTER, **extra})
    cat = tmp_path / "cat.ecsv"
    cat.write_text("# %ECSV 1.0\n# ---\n# datatype: []\n")
    assert main(fit_command(cat, sat_file, tmp_path / "run")) == 2
    err = capsys.readouterr().err
    assert key in err and "sat.toml" in err and "Traceback" not in err


def test_satellite_file_chooses_the_milky_way_model():
    # the flat rotation curve's enclosed mass: M(<r) = v_c^2 r / G (Binney & Tremaine 2008,
    # singular isothermal sphere), v_c = 220 km/s at the fixed galactocentric distance of 15 kpc
    sat = _satellite(3e5, 4.0, 15.0, 12.0, milky_way_model="Isothermal220")
    assert sat.milky_way_model == "isothermal220"
    mw = _nature(sat, {STARS_ONLY: _draws(sat)})["tides"]["milky_way"]
    assert mw["model"] == "isothermal220", mw
    mass = mw["enclosed_mass_msun"]
    m = mass["median"] if isinstance(mass, dict) else mass
    assert m == pytest.approx(220.0**2 * 15.0 / G, rel=1e-3)
