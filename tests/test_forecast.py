"""`halo forecast` through the CLI: a tiny fit of a mock, then two plans (+10 stars, a second
epoch a year later) x 1 posterior draw fitted on a real Dask LocalCluster (1 worker, so that the
second fit reuses the first one's programs): the future catalogues, the numbers per plan against
each fit's summary.json, the decisive-plan rule, and bad plans refused in one line (exit 2)."""

import json

import numpy as np
import pytest
from astropy.table import Table
from fit_setup import NO_EXTRAS, fit_command, write_testa
from sbc_setup import run_cli

from halo.cli.app import main
from halo.mock.catalogue import make_mock

TINY = ["--chains", "2", "--warmup", "50", "--draws", "50", "--quiet"]


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    """A 25-star mock of the small field (NFW halo), fitted with nfw and stars only."""
    from halo.inputs.satellite import read_satellite
    from halo.physics.dark_closed import NFW

    root = tmp_path_factory.mktemp("forecast")
    sat_path = write_testa(root / "field.toml", "Testa")
    dark = NFW.from_m200_c200(1e9, 15.0)
    mock = make_mock(read_satellite(sat_path), dark, n_stars=25, v_sys=87.0, seed=4)
    cat = root / "cat.ecsv"
    mock.table.meta.clear()
    mock.table.write(cat, format="ascii.ecsv")
    run = root / "fit"
    code = main([*fit_command(cat, sat_path, run, "nfw"), *NO_EXTRAS, *TINY])
    assert code == 0
    out = root / "fc"
    args = ["forecast", str(run), "--out", str(out), "--plan", "+10", "--plan", "epochs"]
    args += ["--draws-per-plan", "1", "--workers", "1", *NO_EXTRAS, *TINY]
    return run, out, run_cli(args)


def test_forecast_files_and_numbers(fitted):
    run, out, (code, stdout, stderr) = fitted
    assert code == 0, stdout + stderr
    for f in ("forecast.json", "forecast.ecsv", "lnb_vs_n.png"):
        assert (out / f).is_file(), f
    res = json.loads((out / "forecast.json").read_text())
    assert res["model"] == "nfw" and [p["plan"] for p in res["plans"]] == ["+10", "epochs"]
    assert res["command"].startswith("halo forecast ")
    members = Table.read(run / "members.ecsv")
    errs = set(np.round(np.asarray(members["v_mean_err_kms"], dtype=float), 12))
    n_now = res["n_stars_now"]
    assert n_now == len(members)
    for e in res["entries"]:
        cat = Table.read(out / "mocks" / f"{e['name']}.ecsv")
        n_ids = len(set(cat["id"]))
        if e["plan"] == "+10":
            assert n_ids == n_now + 10 and len(cat) == n_ids
        else:  # every star twice, a year (365.25 d) apart
            assert n_ids == n_now and len(cat) == 2 * n_ids
            assert set(np.round(np.diff(sorted(set(cat["mjd"]))), 6)) == {365.25}
        # every row's error is one of the fitted catalogue's errors
        assert set(np.round(np.asarray(cat["vlos_err"], dtype=float), 12)) <= errs
        s = json.loads((out / "fits" / e["name"] / "summary.json").read_text())["models"]["nfw"]
        assert e["ln_b"] == s["vs_stars_only"]["ln_bayes_factor"]
        m = s["derived"]["m_half_msun"]
        assert e["m_half_width_dex"] == pytest.approx(np.log10(m["p84"] / m["p16"]))
    for p in res["plans"]:
        lnb = [e["ln_b"] for e in res["entries"] if e["plan"] == p["plan"]]
        assert p["n_fits"] == 1 and p["ln_b"]["q50"] == pytest.approx(np.median(lnb))
        assert p["p_abs_ln_b_gt_3"] == np.mean(np.abs(lnb) > 3)
    first = next((p["plan"] for p in res["plans"] if p["p_abs_ln_b_gt_3"] >= 0.9), None)
    assert res["decisive_plan"] == first
    assert "P(|ln B| > 3)" in stdout and "first plan reaching" in stdout


@pytest.mark.parametrize("plan", ["+0", "ten", "+5:second", "epochs+5"])
def test_a_bad_plan_is_one_line_and_exit_2(plan, tmp_path, capsys):
    code = main(["forecast", str(tmp_path), "--out", str(tmp_path / "o"), "--plan", plan, *TINY])
    err = capsys.readouterr().err.strip()
    assert code == 2 and "--plan" in err and "\n" not in err


def test_a_folder_that_is_no_fit_is_refused(tmp_path, capsys):
    code = main(["forecast", str(tmp_path), "--out", str(tmp_path / "o"), "--plan", "+5"])
    err = capsys.readouterr().err.strip()
    assert code == 2 and "summary.json" in err and "\n" not in err
