"""`halo batch` on a real Dask LocalCluster (2 worker processes on loopback) with tiny fits: a
three-entry manifest with one bad entry, the batch tables against each entry's summary.json, the
rerun that skips what is finished and retries what failed, and the same numbers as `halo fit`."""

import contextlib
import io
import json

import pytest
from astropy.table import Table
from batch_setup import TINY, entry_toml, write_inputs, write_manifest
from fit_setup import fit_command

from halo.cli.app import main
from halo.core.vocabulary import QUANTILE_KEYS, STARS_ONLY, angle_keys


@pytest.fixture(scope="module")
def batch(tmp_path_factory):
    """The three-entry batch, run once: (manifest, out, exit code, stdout, stderr)."""
    root = tmp_path_factory.mktemp("batch")
    paths = write_inputs(root / "in", ["a", "b"])
    (root / "in" / "bad.csv").write_text("id,ra,dec,vlos\n1,151.25,-23.4,87.0\n")
    manifest = write_manifest(
        root / "in" / "m.toml",
        entry_toml("alpha", "a.ecsv", models='["nfw"]', seed=1),
        entry_toml("beta", "b.ecsv", models=f'["{STARS_ONLY}"]'),
        entry_toml("broken", "bad.csv", models=f'["{STARS_ONLY}"]'),
    )
    out = root / "out"
    code, stdout, stderr = _run_cli(["batch", str(manifest), "--out", str(out), "--workers", "2"])
    return manifest, out, code, stdout, stderr, paths


def _run_cli(args):
    """main(args + the tiny fit options) with stdout and stderr captured: (code, out, err)."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([*args, *TINY])
    return code, out.getvalue(), err.getvalue()


def _records(out):
    return {r["name"]: r for r in json.loads((out / "batch.json").read_text())}


def test_every_entry_runs_and_a_bad_one_fails_alone(batch):
    manifest, out, code, stdout, stderr, _ = batch
    assert code == 1, stderr  # one entry failed
    recs = _records(out)
    assert [recs[n]["status"] for n in ("alpha", "beta", "broken")] == ["done", "done", "failed"]
    # the bad entry's one-line error names its file and the missing column
    err = recs["broken"]["error"]
    assert "bad.csv" in err and "vlos_err" in err and "\n" not in err
    assert "FAILED broken: " in stdout and "2 of 3 entries done" in stdout
    # each finished entry is a whole `halo fit` folder, no unfinished folder is left
    for name in ("alpha", "beta"):
        for f in ("summary.json", "summary.ecsv", "members.ecsv", "report.html"):
            assert (out / name / f).is_file(), (name, f)
    assert not (out / "broken").exists()
    assert sorted(p.name for p in out.iterdir()) == ["alpha", "batch.ecsv", "batch.json", "beta"]
    # the progress bar over entries, on stderr
    assert "batch: 100%" in stderr and "3/3" in stderr


def test_the_tables_hold_each_entrys_summary_numbers(batch):
    _, out, *_ = batch
    t = Table.read(out / "batch.ecsv", format="ascii.ecsv")
    models = t["model"].filled("")  # an empty string reads back as a masked value
    rows = {(r["name"], m): r for r, m in zip(t, models, strict=True)}
    assert set(rows) == {
        ("alpha", "nfw"),
        ("alpha", STARS_ONLY),
        ("beta", STARS_ONLY),
        ("broken", ""),
    }
    s = json.loads((out / "alpha" / "summary.json").read_text())["models"]["nfw"]
    row = rows[("alpha", "nfw")]
    d = s["derived"]
    for q in QUANTILE_KEYS:
        assert row[f"m_half_msun_{q}"] == d["m_half_msun"][q]
        for a in angle_keys():  # 0.1, 0.2, 0.5 deg and 2 r_h
            assert row[f"log10_j_{a}_{q}"] == d["log10_j"][a][q]
            assert row[f"log10_d_{a}_{q}"] == d["log10_d"][a][q]
    assert row["ln_b"] == s["vs_stars_only"]["ln_bayes_factor"]
    assert row["converged"] == s["converged"] and row["rhat_max"] == s["diagnostics"]["rhat_max"]
    assert row["wall_time_s"] > 0 and row["attempts"] == 1
    assert rows[("broken", "")]["status"] == "failed"


def test_a_rerun_skips_finished_entries_and_retries_failed_ones(batch):
    manifest, out, *_ = batch
    stamps = {n: (out / n / "summary.json").stat().st_mtime_ns for n in ("alpha", "beta")}
    code, stdout, stderr = _run_cli(["batch", str(manifest), "--out", str(out), "--workers", "1"])
    assert code == 1, stderr
    assert "2 finished earlier with the same inputs, 1 run now, 1 failed" in stdout
    recs = _records(out)
    assert {n: recs[n]["attempts"] for n in recs} == {"alpha": 1, "beta": 1, "broken": 2}
    assert stamps == {n: (out / n / "summary.json").stat().st_mtime_ns for n in stamps}


def test_the_numbers_are_those_of_a_single_halo_fit(batch, tmp_path):
    _, out, *_, paths = batch
    single = tmp_path / "single"
    args = fit_command(paths["b"], paths["satellite"], single, STARS_ONLY) + ["--quiet"]
    assert main([*args, *TINY]) == 0
    a = json.loads((out / "beta" / "summary.json").read_text())["models"][STARS_ONLY]
    b = json.loads((single / "summary.json").read_text())["models"][STARS_ONLY]
    # the same seed gives bit for bit the same posterior summary in a worker and in `halo fit`
    for key in ("parameters", "derived", "diagnostics", "evidence", "loo"):
        assert a[key] == b[key], key
