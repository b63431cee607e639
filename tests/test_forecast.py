"""`halo forecast` (keeping the observed stars) through the CLI: a tiny fit of a two-epoch mock,
then a plan of 10 new stars and a plan of new epochs on two dates for three chosen stars (with
--new-errors), 1 posterior draw each, fitted on a real Dask LocalCluster (1 worker): the kept rows
are the catalogue's, the new rows have the count, ids, dates and error range asked for, the
written epoch velocities are those of halo.batch.forecast_keep.new_epoch_velocities (spied on in
the CLI run), and the numbers per plan match each fit's summary.json. Then, without fits: new
stars' errors drawn from the catalogue, the bare `epochs` date, --resimulate, and the one-line
errors (bad id, missing catalogue, clashing date, bad plans)."""

import json
import shutil

import numpy as np
import pytest
from astropy.table import Table
from astropy.time import Time
from fit_setup import NO_EXTRAS, fit_command, write_testa
from sbc_setup import run_cli

from halo.batch import forecast_keep
from halo.batch.forecast import parse_plan, write_forecast_mocks
from halo.cli.app import main
from halo.core.errors import InputError
from halo.mock.catalogue import make_mock

TINY = ["--chains", "2", "--warmup", "50", "--draws", "50", "--quiet"]
CHOSEN = ["3", "7", "12"]
MJD_2027_03_01 = Time("2027-03-01", scale="utc").mjd  # reference: astropy.time


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    """A 25-star mock (NFW halo; 40% of the stars observed again 40 d later), fitted with nfw and
    stars only, and its forecast through the CLI with new_epoch_velocities spied on."""
    from halo.inputs.satellite import read_satellite
    from halo.physics.dark_closed import NFW

    root = tmp_path_factory.mktemp("forecast_new")
    sat_path = write_testa(root / "field.toml", "Testa")
    dark = NFW.from_m200_c200(1e9, 15.0)
    sat = read_satellite(sat_path)
    mock = make_mock(
        sat, dark, n_stars=25, v_sys=87.0, seed=4, epochs_mjd=[60000.0, 60040.0],
        repeat_fraction=0.4,
    )  # fmt: skip
    cat = root / "cat.ecsv"
    mock.table.meta.clear()
    mock.table.write(cat, format="ascii.ecsv")
    run = root / "fit"
    assert main([*fit_command(cat, sat_path, run, "nfw"), *NO_EXTRAS, *TINY]) == 0
    out = root / "fc"
    args = ["forecast", str(run), "--out", str(out), "--plan", "+10"]
    args += ["--plan", "epochs@2027-03-01,61500", "--epoch-stars", ",".join(CHOSEN)]
    args += ["--new-errors", "0.5,0.8", "--draws-per-plan", "1", "--workers", "1"]
    calls, real = [], forecast_keep.new_epoch_velocities

    def spy(*a, **k):
        got = real(*a, **k)
        calls.append(np.array(got[0]))
        return got

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(forecast_keep, "new_epoch_velocities", spy)
        result = run_cli([*args, *NO_EXTRAS, *TINY])
    return {"run": run, "cat": cat, "out": out, "result": result, "calls": calls}


def _future(f, name):
    return Table.read(f["out"] / "mocks" / f"{name}.ecsv")


def _kept_rows_identical(cat_path, future):
    cat = Table.read(cat_path)
    for name in cat.colnames:
        assert np.array_equal(np.asarray(future[name][: len(cat)]), np.asarray(cat[name])), name
        assert future[name].unit == cat[name].unit, name
    return cat


def test_cli_keeps_the_stars_and_adds_what_the_plans_say(fitted):
    code, stdout, stderr = fitted["result"]
    assert code == 0, stdout + stderr
    res = json.loads((fitted["out"] / "forecast.json").read_text())
    assert res["mode"] == "keep observed stars" and res["catalogue"] == str(fitted["cat"])
    add, ep = res["entries"]
    assert (add["plan"], ep["plan"]) == ("+10", "epochs@2027-03-01,61500")
    # +10: the catalogue as measured, then 10 new stars, errors uniform in [0.5, 0.8] km/s,
    # observed a year (365.25 d) after the catalogue's last epoch
    fut = _future(fitted, add["name"])
    cat = _kept_rows_identical(fitted["cat"], fut)
    new = fut[len(cat) :]
    assert len(new) == 10 and len(set(new["id"])) == 10 and not set(new["id"]) & set(cat["id"])
    e = np.asarray(new["vlos_err"], dtype=float)
    assert e.min() >= 0.5 and e.max() <= 0.8
    assert set(np.asarray(new["mjd"])) == {60040.0 + 365.25}
    # epochs@: rows at exactly the given MJDs for exactly the chosen ids
    fut = _future(fitted, ep["name"])
    _kept_rows_identical(fitted["cat"], fut)
    new = fut[len(cat) :]
    assert sorted(zip(new["id"].astype(str), new["mjd"], strict=True)) == sorted(
        (i, d) for i in CHOSEN for d in (MJD_2027_03_01, 61500.0)
    )
    e = np.asarray(new["vlos_err"], dtype=float)
    assert e.min() >= 0.5 and e.max() <= 0.8
    # the CLI path wrote the velocities of new_epoch_velocities (star by star, date by date)
    assert len(fitted["calls"]) == 1
    assert np.asarray(new["vlos"], dtype=float) == pytest.approx(fitted["calls"][0].ravel())
    plans = {p["plan"]: p for p in res["plans"]}
    assert plans["epochs@2027-03-01,61500"]["epoch_stars"] == CHOSEN
    assert plans["epochs@2027-03-01,61500"]["dates_mjd"] == [MJD_2027_03_01, 61500.0]
    assert "new epochs at MJD 61465.00, 61500.00 for 3 star(s): 3, 7, 12" in stdout
    assert "first plan reaching |ln B| > 3 with 90% probability" in stdout


def test_new_star_errors_from_the_catalogue_and_the_bare_epoch(fitted, tmp_path):
    plans = [parse_plan("+10"), parse_plan("epochs")]
    _, meta, entries = write_forecast_mocks(fitted["run"], tmp_path, plans, 1)
    cat = Table.read(fitted["cat"])
    errs = set(np.asarray(cat["vlos_err"], dtype=float))
    add = Table.read(tmp_path / "mocks" / f"{entries[0][0]}.ecsv")
    assert set(np.asarray(add["vlos_err"][len(cat) :], dtype=float)) <= errs
    ep = Table.read(tmp_path / "mocks" / f"{entries[1][0]}.ecsv")
    _kept_rows_identical(fitted["cat"], ep)
    new = ep[len(cat) :]
    # every star once more, a year after the last epoch, with its own last error
    assert sorted(new["id"]) == sorted(set(cat["id"]))
    assert set(np.asarray(new["mjd"])) == {60040.0 + 365.25}
    assert "last epoch (MJD 60040.00)" in meta["bare_epoch_rule"]


def test_resimulate_draws_whole_catalogues(fitted, tmp_path):
    _, meta, entries = write_forecast_mocks(
        fitted["run"], tmp_path, [parse_plan("+5")], 1, resimulate=True
    )
    fut = Table.read(tmp_path / "mocks" / f"{entries[0][0]}.ecsv")
    cat = Table.read(fitted["cat"])
    assert meta["mode"] == "resimulate" and len(set(fut["id"])) == len(set(cat["id"])) + 5
    assert not np.isin(np.asarray(fut["vlos"]), np.asarray(cat["vlos"])).any()


def _cli_error(args, capsys):
    code = main(args)
    err = capsys.readouterr().err.strip()
    assert code == 2 and "\n" not in err, err
    return err


def test_bad_ids_and_resimulate_with_ids_are_one_line(fitted, tmp_path, capsys):
    base = ["forecast", str(fitted["run"]), "--plan", "epochs", *TINY]
    err = _cli_error([*base, "--out", str(tmp_path / "a"), "--epoch-stars", "3,nosuch"], capsys)
    assert err.startswith("error: --epoch-stars") or "--epoch-stars: unknown" in err
    assert "'nosuch'" in err
    ids = tmp_path / "ids.txt"
    ids.write_text("3\nzz9\n")
    err = _cli_error([*base, "--out", str(tmp_path / "b"), "--epoch-stars", str(ids)], capsys)
    assert "--epoch-stars" in err and "'zz9'" in err
    args = [*base, "--out", str(tmp_path / "c"), "--epoch-stars", "3", "--resimulate"]
    assert "--resimulate" in _cli_error(args, capsys)
    args = [*base[:2], "--plan", "epochs@60040", *TINY, "--out", str(tmp_path / "d")]
    assert "already has an epoch at MJD 60040" in _cli_error(args, capsys)
    args = [*base, "--out", str(tmp_path / "e"), "--new-errors", "2,1"]
    assert "--new-errors" in _cli_error(args, capsys)


def test_a_missing_catalogue_asks_for_catalogue(fitted, tmp_path, capsys):
    run = tmp_path / "fit"
    shutil.copytree(fitted["run"], run)
    summary = json.loads((run / "summary.json").read_text())
    summary["catalogue"]["source"] = str(tmp_path / "gone.ecsv")
    (run / "summary.json").write_text(json.dumps(summary))
    args = ["forecast", str(run), "--out", str(tmp_path / "o"), "--plan", "+5", *TINY]
    err = _cli_error(args, capsys)
    assert "gone.ecsv is missing" in err and "--catalogue FILE" in err
    plans = [parse_plan("+5")]
    _, meta, _ = write_forecast_mocks(run, tmp_path / "p", plans, 1, catalogue=fitted["cat"])
    assert meta["catalogue"] == str(fitted["cat"])
    other = tmp_path / "other.ecsv"
    Table.read(fitted["cat"])[:-1].write(other, format="ascii.ecsv")
    with pytest.raises(InputError, match="--catalogue .* not the catalogue the fit used"):
        write_forecast_mocks(run, tmp_path / "q", plans, 1, catalogue=other)


def test_forecast_numbers_against_each_fit(fitted):
    """The per-plan numbers against each future fit's summary.json, and the decisive-plan rule."""
    out = fitted["out"]
    assert fitted["result"][0] == 0
    for f in ("forecast.json", "forecast.ecsv", "lnb_vs_n.png"):
        assert (out / f).is_file(), f
    res = json.loads((out / "forecast.json").read_text())
    assert res["model"] == "nfw" and res["command"].startswith("halo forecast ")
    assert res["n_stars_now"] == len(Table.read(fitted["run"] / "members.ecsv"))
    for e in res["entries"]:
        whole = json.loads((out / "fits" / e["name"] / "summary.json").read_text())
        s = whole["models"]["nfw"]
        assert e["ln_b"] == s["vs_stars_only"]["ln_bayes_factor"]
        m = s["derived"]["m_half_msun"]
        assert e["m_half_width_dex"] == pytest.approx(np.log10(m["p84"] / m["p16"]))
        # the fit read every row of its future catalogue, the epochs merged into stars
        fut = _future(fitted, e["name"])
        assert whole["catalogue"]["n_rows"] == len(fut)
        assert whole["catalogue"]["n_stars"] == len(set(fut["id"])) == e["n_stars"]
    for p in res["plans"]:
        lnb = [e["ln_b"] for e in res["entries"] if e["plan"] == p["plan"]]
        assert p["n_fits"] == 1 and p["ln_b"]["q50"] == pytest.approx(np.median(lnb))
        assert p["p_abs_ln_b_gt_3"] == np.mean(np.abs(lnb) > 3)
    first = next((p["plan"] for p in res["plans"] if p["p_abs_ln_b_gt_3"] >= 0.9), None)
    assert res["decisive_plan"] == first


@pytest.mark.parametrize("plan", ["+0", "ten", "+5:second", "epochs+5", "epochs@2027-02-30"])
def test_a_bad_plan_is_one_line_and_exit_2(plan, tmp_path, capsys):
    code = main(["forecast", str(tmp_path), "--out", str(tmp_path / "o"), "--plan", plan, *TINY])
    err = capsys.readouterr().err.strip()
    assert code == 2 and "--plan" in err and "\n" not in err


def test_a_folder_that_is_no_fit_is_refused(tmp_path, capsys):
    code = main(["forecast", str(tmp_path), "--out", str(tmp_path / "o"), "--plan", "+5"])
    err = capsys.readouterr().err.strip()
    assert code == 2 and "summary.json" in err and "\n" not in err


def _run_on(fitted, tmp_path, table):
    """A copy of the fit folder whose summary.json names ``table`` (written as its catalogue)."""
    import hashlib

    run, cat = tmp_path / "fit", tmp_path / "cat2.ecsv"
    shutil.copytree(fitted["run"], run)
    table.write(cat, format="ascii.ecsv")
    summary = json.loads((run / "summary.json").read_text())
    summary["catalogue"].update(
        source=str(cat), sha256=hashlib.sha256(cat.read_bytes()).hexdigest()
    )
    (run / "summary.json").write_text(json.dumps(summary))
    return run, summary


def test_bare_epochs_without_mjd_are_a_year_after_the_fit(fitted, tmp_path):
    from halo.batch.manifest import read_manifest

    one = Table.read(fitted["cat"])
    one = one[one["mjd"] == 60000.0]
    one.remove_column("mjd")
    one.rename_column("vlos", "VHEL")
    run, summary = _run_on(fitted, tmp_path, one)
    plans = [parse_plan("epochs")]
    with pytest.raises(InputError, match="missing required column 'vlos'"):
        write_forecast_mocks(run, tmp_path / "a", plans, 1)
    manifest, meta, entries = write_forecast_mocks(
        run, tmp_path / "b", plans, 1, columns=["vlos=VHEL"]
    )
    fut = Table.read(manifest.parent / f"{entries[0][0]}.ecsv")
    # MJD of the fit's date: astropy.time of summary.json's "created" stamp
    t_fit = Time(summary["created"][:19], scale="utc").mjd
    assert np.asarray(fut["mjd"][: len(one)]) == pytest.approx(np.full(len(one), t_fit))
    assert np.asarray(fut["mjd"][len(one) :]) == pytest.approx(np.full(len(one), t_fit + 365.25))
    assert np.array_equal(np.asarray(fut["VHEL"][: len(one)]), np.asarray(one["VHEL"]))
    assert "the fit's date" in meta["bare_epoch_rule"]
    # the fits are told the catalogue's own column names
    (entry,) = read_manifest(manifest)
    assert entry.columns == ("vlos=VHEL",)
