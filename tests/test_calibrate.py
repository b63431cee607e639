"""`halo calibrate`: the prior draws against the spec's priors (reference distributions of
scipy.stats), the truths against the mock generator's own, and tiny calibrations through the CLI
on a real Dask LocalCluster (2 workers): the files, ranks in 0..L that equal those recounted from
each fit's posterior.nc, the uniformity p-values recomputed with scipy, and the false-dark-matter
fields of a stars-only calibration."""

import json

import arviz as az
import numpy as np
import pytest
from astropy.table import Table
from sbc_setup import run_cli
from scipy import stats

from halo.batch.sbc import SbcDesign, calibration_satellite, prior_draws, write_mocks
from halo.batch.sbc_ranks import draw_values, quantities_of
from halo.cli.app import main
from halo.inputs.spec import load_spec
from halo.pipeline.demo import demo_satellite_path

# 2 chains x (50 + 50): 100 draws, thinned to L = 99 (the fewest the fit allows)
TINY = ["--chains", "2", "--warmup", "50", "--draws", "50", "--workers", "2", "--quiet"]
L = 99


@pytest.fixture(scope="module")
def sat():
    return calibration_satellite(demo_satellite_path(), v_sys_prior=(87.0, 5.0))[0]


def test_prior_draws_follow_the_spec_priors(sat):
    """2000 draws of the nfw spec's prior, each parameter against its scipy.stats reference
    distribution (KS, p > 0.001): log10 M200 ~ U(5, 11) and beta~ = beta / (2 - beta) ~
    U(-0.95, 0.95) (models/nfw.toml), v_sys ~ N(87, 5) (the given prior), distance ~ N(45, 2.5)
    truncated at 4.5 kpc and r_half ~ N(40, 4) pc truncated at 0 (the demo satellite file's
    values), f_binary ~ U(0, 1) (the default [binaries] fraction range)."""
    draws = prior_draws(load_spec("nfw"), sat, 2000, seed=3)
    refs = {
        "log10_m200": stats.uniform(5.0, 6.0),
        "beta_sym": stats.uniform(-0.95, 1.9),
        "v_sys": stats.norm(87.0, 5.0),
        "distance": stats.truncnorm((4.5 - 45.0) / 2.5, np.inf, 45.0, 2.5),
        "r_half_pc": stats.truncnorm(-10.0, np.inf, 40.0, 4.0),
        "f_binary": stats.uniform(0.0, 1.0),
    }
    for site, ref in refs.items():
        assert draws[site].shape == (2000,)
        assert stats.kstest(draws[site], ref.cdf).pvalue > 1e-3, site
    # beta = 2 beta~ / (1 + beta~) (the symmetrised prior's definition, halo.inference.model)
    np.testing.assert_allclose(draws["beta"], 2 * draws["beta_sym"] / (1 + draws["beta_sym"]))
    # the stellar mass scales with (distance / d0)^2 (a luminosity does, common practice)
    np.testing.assert_allclose(draws["m_star"], draws["m_star_d0"] * (draws["distance"] / 45) ** 2)


def test_a_satellite_without_a_v_sys_prior_is_refused(sat):
    from halo.core.errors import InputError
    from halo.inputs.satellite import read_satellite

    with pytest.raises(InputError, match="v_sys_err_kms"):
        prior_draws(load_spec("nfw"), read_satellite(demo_satellite_path()), 10)


def test_truths_are_the_mock_generators_own(tmp_path):
    """M(<r_1/2) of a truth from the fit's derived quantities at the drawn distance and r_half
    equals the mass the mock generator puts inside r_1/2 of the mock's own satellite."""
    design = SbcDesign("nfw", 3, 20, seed=5, foreground_max=0.3)
    _, sat, truths = write_mocks(design, demo_satellite_path(), tmp_path, ["nfw"],
                                 v_sys_prior=(87.0, 5.0))  # fmt: skip
    keys = quantities_of(design.spec, True)
    draws = {k: np.array([t["prior_draw"][k] for t in truths]) for k in truths[0]["prior_draw"]}
    vals = draw_values(design.spec, sat, draws, keys)
    np.testing.assert_allclose(vals["m_half_msun"], [t["m_half_msun"] for t in truths], rtol=1e-9)
    for t in truths:
        table = Table.read(tmp_path / "mocks" / f"{t['name']}.ecsv")
        assert len(table) == 20 and t["n_foreground"] == round(t["foreground_fraction"] * 20)
        assert t["binary_fraction"] == t["prior_draw"]["f_binary"]
        assert t["v_sys_kms"] == t["prior_draw"]["v_sys"]


@pytest.fixture(scope="module")
def nfw_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("sbc") / "nfw"
    args = ["calibrate", "nfw", "--out", str(out), "--mocks", "3", "--stars", "20", "--seed", "2"]
    args += ["--v-sys-prior", "87,5", "--foreground-max", "0", "--no-foreground", *TINY]
    code, stdout, stderr = run_cli(args)
    return out, code, stdout, stderr


def _posterior(folder, model):
    post = az.from_netcdf(str(folder / model / "posterior.nc"))["posterior"]
    return {k: np.asarray(post[k].values).reshape(-1) for k in ("v_sys", "f_binary")}


@pytest.mark.slow  # about 3 min of CPU (binaries in 3 fits of two models on 2 workers)
def test_the_calibration_files_and_ranks(nfw_run):
    out, code, stdout, stderr = nfw_run
    assert code == 0, stdout + stderr
    for f in ("calibration.json", "calibration.ecsv", "rank_histograms.png"):
        assert (out / f).is_file(), f
    res = json.loads((out / "calibration.json").read_text())
    assert res["n_done"] == 3 and res["n_rank_draws"] == L and res["ranked_model"] == "nfw"
    assert res["command"].startswith("halo calibrate nfw --out ")
    assert set(res["quantities"]) == {"m_half_msun", "log10_j_0.5deg", "f_binary", "v_sys_kms"}
    # diagnostics: the sampled parameters of models/nfw.toml and the nuisances
    assert {"log10_m200", "log10_c200", "beta_sym", "distance"} <= set(res["sampled_parameters"])
    idx = np.floor(np.arange(L) * (100 / L)).astype(int)  # L evenly spaced of the 100 draws
    for e in res["entries"]:
        assert all(0 <= r <= L for r in e["ranks"].values())
        post = _posterior(out / "fits" / e["name"], "nfw")
        for site, key in (("v_sys", "v_sys_kms"), ("f_binary", "f_binary")):
            # the rank recounted: draws below the truth (Talts et al. 2018, Algorithm 1)
            assert e["ranks"][key] == int(np.sum(post[site][idx] < e["truth"][key])), key
            # where the result sits: the thinned draws' median and sd
            med, sd = np.median(post[site][idx]), np.std(post[site][idx], ddof=1)
            assert e["posterior"][key] == {"median": pytest.approx(med), "sd": pytest.approx(sd)}
        truth = json.loads((out / "mocks" / f"{e['name']}.truth.json").read_text())
        assert e["truth"]["v_sys_kms"] == truth["v_sys_kms"]
    q = res["quantities"]["v_sys_kms"]
    ranks = np.array(q["ranks"])
    hist = np.histogram(ranks, bins=10, range=(0, L + 1))[0]
    assert q["histogram"] == hist.tolist()
    # Pearson's chi-square of the histogram against equal counts (scipy.stats.chisquare)
    assert q["chi2"]["p_value"] == pytest.approx(stats.chisquare(hist).pvalue, rel=1e-9)
    inside = np.mean((ranks >= 16) & (ranks <= L - 16))  # 68%: lo = floor(0.16 x 100 + 0.5)
    assert q["coverage"]["0.68"]["fraction"] == inside
    assert q["rank_bias"]["value"] == pytest.approx(ranks.mean() / L - 0.5)
    z = [(e["posterior"]["v_sys_kms"]["median"] - e["truth"]["v_sys_kms"])
         / e["posterior"]["v_sys_kms"]["sd"] for e in res["entries"]]  # fmt: skip
    assert q["z"]["mean"] == pytest.approx(np.mean(z))
    t = Table.read(out / "calibration.ecsv")
    assert len(t) == 3 and list(t["rank_v_sys_kms"]) == [e["ranks"]["v_sys_kms"]
                                                         for e in res["entries"]]  # fmt: skip
    assert res["false_dark_matter"] is None
    assert "chi2 p = " in stdout and "coverage 68%" in stdout


@pytest.mark.slow  # needs the run above
def test_a_rerun_fits_nothing_again(nfw_run):
    out, *_ = nfw_run
    stamps = sorted(p.stat().st_mtime_ns for p in (out / "fits").glob("*/summary.json"))
    args = ["calibrate", "nfw", "--out", str(out), "--mocks", "3", "--stars", "20", "--seed", "2"]
    args += ["--v-sys-prior", "87,5", "--foreground-max", "0", "--no-foreground", *TINY]
    code, stdout, stderr = run_cli(args)
    assert code == 0, stderr
    assert stamps == sorted(p.stat().st_mtime_ns for p in (out / "fits").glob("*/summary.json"))


def test_false_dark_matter_of_a_stars_only_calibration(tmp_path):
    out = tmp_path / "so"
    args = ["calibrate", "stars-only", "--out", str(out), "--mocks", "2", "--stars", "30"]
    args += ["--model", "nfw", "--v-sys-prior", "87,5", "--foreground-max", "0"]
    code, stdout, stderr = run_cli([*args, "--no-foreground", "--no-binaries", *TINY])
    assert code == 0, stdout + stderr
    res = json.loads((out / "calibration.json").read_text())
    assert res["fit_models"] == ["nfw", "stars-only"] and res["ranked_model"] == "stars-only"
    assert set(res["quantities"]) == {"m_half_msun", "v_sys_kms"}
    fdm = res["false_dark_matter"]["nfw"]
    ln_b = [
        json.loads((out / "fits" / e["name"] / "summary.json").read_text())["models"]["nfw"][
            "vs_stars_only"
        ]["ln_bayes_factor"]
        for e in res["entries"]
    ]
    assert fdm["n"] == 2 and fdm["ln_b"] == pytest.approx(ln_b)
    for t in (1, 3):
        k = sum(v > t for v in ln_b)
        assert fdm[f"gt_{t}"]["fraction"] == k / 2
        # the Clopper-Pearson (1934) interval, from scipy.stats.binomtest
        ci = stats.binomtest(k, 2).proportion_ci(0.95, method="exact")
        assert fdm[f"gt_{t}"]["lower_95"] == pytest.approx(ci.low, abs=1e-9)
        assert fdm[f"gt_{t}"]["upper_95"] == pytest.approx(ci.high, abs=1e-9)
    assert "ln_b_nfw" in Table.read(out / "calibration.ecsv").colnames
    assert "false dark matter (nfw)" in stdout
    # diagnostics: every sampled parameter of the stars-only prior (halo.inference.model's sample
    # sites: the demo satellite gives a stellar mass, so m_star_d0; models/stars-only.toml's
    # constant anisotropy; no f_binary without binaries)
    params = res["sampled_parameters"]
    assert list(params) == ["v_sys", "distance", "r_half_pc", "m_star_d0", "beta_sym"]
    idx = np.floor(np.arange(L) * (100 / L)).astype(int)  # L evenly spaced of the 100 draws
    for i, e in enumerate(res["entries"]):
        post = az.from_netcdf(str(out / "fits" / e["name"] / "stars-only" / "posterior.nc"))
        for site in params:
            draws = np.asarray(post["posterior"][site].values).reshape(-1)[idx]
            truth = e["parameter_truth"][site]
            # the rank recounted: draws below the truth (Talts et al. 2018, Algorithm 1)
            assert e["parameter_ranks"][site] == int(np.sum(draws < truth)), site
            assert params[site]["ranks"][i] == e["parameter_ranks"][site]
        # where the result sits: the thinned v_sys draws' median and sd, and the rank bias
        v = np.asarray(post["posterior"]["v_sys"].values).reshape(-1)[idx]
        assert e["posterior"]["v_sys_kms"]["median"] == pytest.approx(np.median(v))
        assert e["posterior"]["v_sys_kms"]["sd"] == pytest.approx(np.std(v, ddof=1))
    q = res["quantities"]["v_sys_kms"]
    assert q["rank_bias"]["value"] == pytest.approx(np.mean(q["ranks"]) / L - 0.5)
    assert "rank bias" in stdout
    assert (
        e["parameter_truth"]["distance"]
        == json.loads((out / "mocks" / f"{e['name']}.truth.json").read_text())["prior_draw"][
            "distance"
        ]
    )
    assert "rank_parameter_distance" in Table.read(out / "calibration.ecsv").colnames
    assert "sampled parameters (diagnostics" in stdout and "r_half_pc " in stdout


@pytest.mark.parametrize(
    "extra, flag",
    [
        (["--bins", "7"], "--bins"),
        (["--mocks", "0"], "--mocks"),
        (["--rank-draws", "500"], "--rank-draws"),
        (["--v-sys-prior", "87"], "--v-sys-prior"),
        (["--foreground-max", "1.5"], "--foreground-max"),
        # robustness mocks (tests/test_calibrate_robustness.py)
        (["--mock-binary-periods", "5"], "--mock-binary-periods"),
        (["--mock-binary-periods", "5,x"], "--mock-binary-periods"),
        (["--mock-binary-periods", "5,0"], "--mock-binary-periods"),
        (["--mock-field", "10:20"], "--mock-field"),
        (["--mock-field", "10:-20:1"], "--mock-field"),
    ],
)
def test_bad_options_are_one_line_and_exit_2(tmp_path, extra, flag, capsys):
    code = main(["calibrate", "nfw", "--out", str(tmp_path / "o"), *TINY, *extra])
    err = capsys.readouterr().err.strip()
    assert code == 2 and flag in err and "\n" not in err and "Traceback" not in err
    assert not (tmp_path / "o" / "fits").exists()
