"""The "2rh" angle is twice the circularised projected half-light radius (not the 3-D r_1/2), and
every J/D output says so and says that the haloes are untruncated: the per-draw derived quantities
the fit writes, `halo predict`, summary.json's conventions, the export's tables and FITS headers."""

import json
import math

import numpy as np
import pytest
from astropy.io import fits
from astropy.table import Table
from export_setup import SAT, exported_run, nfw_posterior

from halo.cli.app import main
from halo.core.constants import DEG
from halo.core.vocabulary import JD_CONVENTIONS
from halo.inputs.build import build_mass_model
from halo.inputs.satellite import parse_satellite
from halo.inputs.spec import load_spec
from halo.physics.cosmology import rho_crit
from halo.physics.jfactor import log10_j
from halo.results.derived import derive, parameter_values

ELLIPTIC = {**SAT, "ellipticity": 0.36}


def test_2rh_is_twice_the_projected_half_light_radius_per_draw():
    post = nfw_posterior()
    samples = {k: np.asarray(v).ravel()[:6] for k, v in post.items()}
    spec = load_spec("nfw")
    der = derive(spec, parse_satellite(ELLIPTIC), samples, sigma_angles_deg=[0.01])
    d, r_e = samples["distance"], samples["r_e_kpc"]  # r_e_kpc: the circularised projected R_e
    np.testing.assert_allclose(der["angle_2rh_deg"], 2 * r_e / d / DEG, rtol=1e-12)
    # not the 3-D half-light radius (1.305 R_e for Plummer, Dejonghe 1987; common practice)
    assert np.all(der["angle_2rh_deg"] < 0.8 * 2 * der["r_half_3d_pc"] * 1e-3 / d / DEG)
    # log10 J under "2rh" (the last angle) is the J of that cone
    vals = {k: v[0] for k, v in parameter_values(spec, samples).items()}
    light = parse_satellite(ELLIPTIC).light(r_e[0])
    _, dark = build_mass_model(spec, vals, light, rho_crit())
    ref = float(log10_j(dark, d[0], 2 * r_e[0] / d[0] / DEG))
    assert der["log10_j"][0, -1] == pytest.approx(ref, abs=1e-10)


def test_predict_2rh_angle_and_conventions(tmp_path, capsys):
    sat = tmp_path / "sat.toml"
    sat.write_text("\n".join(f"{k} = {json.dumps(v)}" for k, v in ELLIPTIC.items()))
    code = main(
        [
            "predict",
            str(sat),
            "--model",
            "nfw",
            "--set",
            "m200=1e9",
            "--set",
            "c200=20",
            "--set",
            "beta=0",
            "--json",
        ]
    )
    assert code == 0
    out = json.loads(capsys.readouterr().out)
    r_e = ELLIPTIC["r_half_pc"] * 1e-3 * math.sqrt(1 - ELLIPTIC["ellipticity"])
    assert out["angles_deg"][-1] == pytest.approx(2 * r_e / ELLIPTIC["distance_kpc"] / DEG)
    assert out["jd_conventions"] == JD_CONVENTIONS
    assert "circularised projected" in out["jd_conventions"]["2rh"]


def test_export_states_the_untruncated_haloes(tmp_path_factory):
    exported = exported_run(tmp_path_factory)
    out = exported["out"]
    table = Table.read(out / "jd_factors.ecsv", format="ascii.ecsv")
    # a run folder without models.<m>.jd_truncation (made before truncation existed) is read as
    # untruncated, and says so (tests/test_jd_truncation.py: the default, truncated, runs)
    assert "untruncated" in table.meta["halo_truncation"] and not any(table["jd_truncated"])
    assert "halo_truncation" in table.meta["conventions"]
    assert table.meta["convention_2rh"] == JD_CONVENTIONS["2rh"]
    draws = Table.read(out / "nfw_draws.ecsv", format="ascii.ecsv")
    assert "untruncated" in draws.meta["halo_truncation"]
    templates = sorted(out.glob("*.fits"))
    assert templates
    for fits_path in templates:
        hdr = fits.getheader(fits_path)
        assert hdr["TRUNCATD"] is False and hdr["TRUNC"] == "NONE"
        assert "untruncated" in " ".join(str(c) for c in hdr["COMMENT"])
