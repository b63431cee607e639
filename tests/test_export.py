"""halo.products.export: the files it writes, its tables against the posterior draws, and its
refusals of existing files, bad run folders and bad options (the run folder:
tests/export_setup.py)."""

import json
import shutil

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table
from export_setup import (
    CHAINS,
    DRAWS,
    SAT,
    SHA,
    exported_run,
    make_run,
    nfw_posterior,
    run_summary,
)

from halo.core.constants import DEG
from halo.core.errors import InputError
from halo.physics.cosmology import rho_crit
from halo.physics.dark import NFW
from halo.physics.jfactor import log10_j
from halo.products.export import export_run
from halo.products.rundir import read_posterior, read_run


@pytest.fixture(scope="module")
def exported(tmp_path_factory):
    return exported_run(tmp_path_factory)


# ----------------------------------------------------------------------------- outputs


def test_written_files(exported):
    out = exported["out"]
    names = [p.name for p in exported["paths"]]
    assert names == [
        "jd_factors.ecsv",
        "nfw_draws.ecsv",
        "nfw_dj_domega.fits",
        "nfw_dd_domega.fits",
        "summary.json",
    ]
    assert all(p.parent == out for p in exported["paths"])
    assert sorted(p.name for p in out.iterdir()) == sorted(names)  # no stars-only, no *.part
    assert (out / "summary.json").read_bytes() == (exported["run"] / "summary.json").read_bytes()


def test_posterior_read_back(exported):
    got = read_posterior(exported["run"] / "nfw" / "posterior.nc", ["m200", "distance"])
    for k in ("m200", "distance"):
        np.testing.assert_array_equal(got[k], exported["post"][k])


# ----------------------------------------------------------------------------- (c) tables


def test_table_quantiles_match_draws(exported):
    out = exported["out"]
    table = Table.read(out / "jd_factors.ecsv", format="ascii.ecsv")
    draws = Table.read(out / "nfw_draws.ecsv", format="ascii.ecsv")
    assert list(table["angle_label"]) == ["0.1", "0.2", "0.5", "1", "2rh"]
    assert list(table["half_angle_deg"][:4]) == [0.1, 0.2, 0.5, 1.0]
    assert set(table["model"]) == {"nfw"}
    assert table.meta["run"]["catalogue_sha256"] == SHA
    assert list(table["converged"]) == [True] * 5 and list(table["preferred"]) == [True] * 5
    assert "exact cone" in table.meta["conventions"]
    assert table["j_mean"].unit == u.GeV**2 / u.cm**5
    assert table["log10_d_median"].unit == u.dex(u.GeV / u.cm**2)
    assert table["log10_d_std"].unit == u.dex  # a width: plain dex
    assert not [c for c in table.colnames if "." in c]
    np.testing.assert_allclose(table["half_angle_deg"][4], np.median(draws["half_angle_2rh_deg"]))
    assert len(draws) == CHAINS * DRAWS
    np.testing.assert_array_equal(draws["distance"], exported["post"]["distance"].ravel())
    for row in table:
        a = row["angle_label"].replace(".", "_")
        for kind in ("j", "d"):
            x = np.asarray(draws[f"log10_{kind}_{a}"])
            pct = np.percentile(x, [50, 16, 84, 2.5, 97.5, 95])
            for q, v in zip(("median", "p16", "p84", "p2_5", "p97_5", "upper95"), pct, strict=True):
                assert row[f"log10_{kind}_{q}"] == pytest.approx(v, rel=1e-14)
            assert row[f"log10_{kind}_mean"] == pytest.approx(np.mean(x), rel=1e-14)
            assert row[f"log10_{kind}_std"] == pytest.approx(np.std(x), rel=1e-12)
            assert row[f"{kind}_mean"] == pytest.approx(np.mean(10.0**x), rel=1e-12)
        assert row["n_draws"] == CHAINS * DRAWS
    # one draw recomputed from its own (m200, c200, distance)
    k = 27
    c, d = int(draws["chain"][k]), int(draws["draw"][k])
    assert (c, d) == divmod(k, DRAWS)
    post = exported["post"]
    nfw = NFW.from_m200_c200(post["m200"][c, d], post["c200"][c, d], rho_c=rho_crit())
    a_2rh = 2 * post["r_e_kpc"][c, d] / post["distance"][c, d] / DEG  # 2 R_e / d
    assert draws["half_angle_2rh_deg"][k] == pytest.approx(a_2rh, rel=1e-14)
    for a, col in ((0.1, "0_1"), (0.5, "0_5"), (1.0, "1"), (a_2rh, "2rh")):
        ref = float(log10_j(nfw, post["distance"][c, d], a))
        assert draws[f"log10_j_{col}"][k] == pytest.approx(ref, abs=1e-12)


# ----------------------------------------------------------------------------- (d) refusals


def test_refuses_to_overwrite(exported, tmp_path):
    out = exported["out"]
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    with pytest.raises(InputError, match="already exists"):
        export_run(exported["run"], out)
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    fresh = tmp_path / "fresh"
    fresh.mkdir()
    (fresh / "nfw_dd_domega.fits").write_text("mine")
    with pytest.raises(InputError, match="nfw_dd_domega.fits"):
        export_run(exported["run"], fresh)
    assert [p.name for p in fresh.iterdir()] == ["nfw_dd_domega.fits"]
    assert (fresh / "nfw_dd_domega.fits").read_text() == "mine"


def _break_summary(run, fn):
    s = run_summary()
    fn(s)
    (run / "summary.json").write_text(json.dumps(s))


@pytest.mark.parametrize(
    ("damage", "where"),
    [
        ("no folder", "run"),
        ("no summary", "summary.json"),
        ("garbled summary", "summary.json"),
        ("no models key", "summary.json"),
        ("bad satellite", "summary.json"),
        ("no posterior", "posterior.nc"),
        ("garbled posterior", "posterior.nc"),
        ("posterior without c200", "posterior.nc"),
    ],
)
def test_bad_run_folder(tmp_path, damage, where):
    run = tmp_path / "run"
    post = nfw_posterior()
    if damage == "posterior without c200":
        post.pop("c200")
    if damage != "no folder":
        make_run(run, post)
    if damage == "no summary":
        (run / "summary.json").unlink()
    elif damage == "garbled summary":
        (run / "summary.json").write_text('{"version": "0.1.0", "models": {')
    elif damage == "no models key":
        _break_summary(run, lambda s: s.pop("models"))
    elif damage == "bad satellite":
        _break_summary(run, lambda s: s["satellite"].pop("ra_deg"))
    elif damage == "no posterior":
        shutil.rmtree(run / "nfw")
    elif damage == "garbled posterior":
        (run / "nfw" / "posterior.nc").write_bytes(b"\x89HDF\r\n\x1a\n not really")
    with pytest.raises(InputError) as info:
        export_run(run, tmp_path / "out")
    msg = str(info.value)
    assert "\n" not in msg and where in msg
    assert not (tmp_path / "out").exists()


def test_bad_options(exported, tmp_path):
    run = exported["run"]
    for kwargs, text in [
        ({"angles_deg": [0.0]}, "--angles-deg"),
        ({"angles_deg": [95.0]}, "--angles-deg"),
        ({"n_template_draws": 0}, "--template-draws"),
        ({"template_half_width_deg": 31.0}, "--half-width-deg"),
        ({"pixel_deg": -1.0}, "--pixel-deg"),
        ({"frame": "fk4"}, "--frame"),
        ({"template_half_width_deg": 5.0, "pixel_deg": 0.001}, "pixels per side"),
    ]:
        with pytest.raises(InputError, match=text):
            export_run(run, tmp_path / "out", **kwargs)
    assert not (tmp_path / "out").exists()


def test_user_spec_file_is_used(tmp_path):
    """A model fitted from a user TOML spec is rebuilt from that file (its spec_source)."""
    spec = tmp_path / "mine.toml"
    spec.write_text(
        'dark_profile = "burkert"\nanisotropy = "constant"\n'
        '[parameters.rho_s]\nprior = "log-uniform"\nlow = 1e6\nhigh = 1e10\n'
        '[parameters.r_s]\nprior = "log-uniform"\nlow = 0.01\nhigh = 10\n'
        '[parameters.beta]\nprior = "uniform"\nlow = -1\nhigh = 0.9\n'
    )
    s = run_summary()
    s["models"]["mine"] = {"converged": False, "spec_source": str(spec)}
    run = make_run(tmp_path / "run", summary=s)
    _, sat, specs = read_run(run)
    assert sat.name == SAT["name"]
    assert set(specs) == {"nfw", "mine"}
    assert specs["mine"].dark_profile == "burkert"
