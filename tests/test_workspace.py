"""Workspaces: stars added in three batches, versions, conflicts, reuse, history, a killed refit.

The catalogue is a distribution-function mock of the demo satellite (halo.mock.catalogue) split
into three observing runs: first epochs of 45 stars; 20 new stars plus second epochs; 15 more
stars. Fits are kept small (2 chains x 150 + 150, nfw and stars-only, no binaries, no
foreground) since the point here is the bookkeeping, not the posterior. The kill is a real
SIGKILL of a `halo refit` subprocess while it is fitting. The bookkeeping without fits is tested
in test_workspace_versions.py.
"""

import hashlib
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from halo.cli.app import main
from halo.core.errors import InputError
from halo.inputs.satellite import read_satellite
from halo.mock.catalogue import make_mock
from halo.physics.cosmology import rho_crit
from halo.physics.dark import CoreNFW
from halo.pipeline.demo import demo_satellite_path
from halo.workspace.record import Workspace
from halo.workspace.views import history, status

FIT = ["--chains", "2", "--warmup", "150", "--draws", "150", "--no-binaries",
       "--no-foreground", "--quiet"]  # fmt: skip


def _batches(folder):
    sat = read_satellite(demo_satellite_path())
    dark = CoreNFW.from_m200_c200(1.5e9, 18.0, rho_c=rho_crit(), r_c=0.06, n=1.0)
    mock = make_mock(
        sat, dark, n_stars=80, v_sys=87.3, error_range_kms=(1.0, 2.0), seed=12,
        epochs_mjd=(60000.0, 60365.0),
    )  # fmt: skip
    t = mock.table
    t.meta.clear()
    ids, mjd = np.asarray(t["id"]), np.asarray(t["mjd"])
    first = mjd == 60000.0
    parts = {
        "b1": t[(ids < 45) & first],
        "b2": t[((ids >= 45) & (ids < 65) & first) | ((ids < 45) & ~first)],
        "b3": t[(ids >= 65) & first],
    }
    paths = {}
    for k, part in parts.items():
        paths[k] = folder / f"{k}.ecsv"
        part.write(paths[k], format="ascii.ecsv")
    bad = parts["b1"][:4].copy()
    bad["vlos"][2] += 5.0
    paths["conflict"] = folder / "conflict.ecsv"
    bad.write(paths["conflict"], format="ascii.ecsv")
    return paths


def _objects_intact(ws):
    for p in ws.objects.iterdir():
        assert hashlib.sha256(p.read_bytes()).hexdigest() == p.stem, p


@pytest.fixture(scope="module")
def workspace(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("ws")
    paths = _batches(tmp)
    root = tmp / "W"
    assert main(["init", str(root), "--satellite", "demo", "--model", "nfw"]) == 0
    return root, paths


def test_three_batches(workspace, capsys, tmp_path):
    root, paths = workspace
    ws = Workspace(root)
    # batch 1, twice: the second add changes nothing
    assert main(["add", str(root), str(paths["b1"])]) == 0
    v1 = ws.latest_catalogue()
    assert main(["add", str(root), str(paths["b1"])]) == 0
    assert ws.latest_catalogue() == v1 and "nothing new" in capsys.readouterr().out
    # a conflicting measurement is refused with one line naming file, row and column
    assert main(["add", str(root), str(paths["conflict"])]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "conflict.ecsv: row 3, column 'vlos'" in err
    assert ws.latest_catalogue() == v1
    # first run, then a refit with nothing changed reuses it without fitting
    assert main(["refit", str(root), *FIT]) == 0
    capsys.readouterr()
    t0 = time.perf_counter()
    assert main(["refit", str(root), "--quiet"]) == 0  # settings remembered from the last run
    assert "nothing changed since run 1" in capsys.readouterr().out
    assert time.perf_counter() - t0 < 30
    # batch 2: new stars and second epochs -> version 2, stale, warm-started refit
    assert main(["add", str(root), str(paths["b2"])]) == 0
    v2 = ws.latest_catalogue()
    assert v2["seq"] == 2 and v2["n_stars"] == 65 and v2["n_rows"] == 110
    st = status(root)
    assert any("catalogue version 2 is newer" in s for s in st["stale"])
    # run 1 did not converge (tiny chains): the warm start runs the full warmup
    assert st["next"] == {"nfw": "warm-full", "stars-only": "warm-full"}
    assert main(["refit", str(root), "--quiet"]) == 0
    s2 = json.loads((root / "runs" / "0002" / "summary.json").read_text())
    assert s2["catalogue"]["n_stars"] == 65 and s2["models"]["nfw"]["warm_start"] is not None
    # a new model spec: only it is fitted, the others are reused from run 2
    spec = tmp_path / "stars-plain.toml"
    spec.write_text(
        'description = "stars alone, isotropic"\ndark_profile = "none"\n'
        'anisotropy = "constant"\n[parameters.beta]\nprior = "fixed"\nvalue = 0.0\n'
    )
    assert main(["refit", str(root), "--model", str(spec), "--quiet"]) == 0
    s3 = json.loads((root / "runs" / "0003" / "summary.json").read_text())
    assert s3["models"]["nfw"]["reused_from"].endswith("0002")
    assert s3["models"]["stars-only"]["reused_from"].endswith("0002")
    assert s3["models"]["stars-plain"]["reused_from"] is None
    assert s3["models"]["nfw"]["evidence"] == s2["models"]["nfw"]["evidence"]
    _objects_intact(ws)


def test_killed_refit_leaves_everything_intact(workspace, capsys):
    root, paths = workspace
    ws = Workspace(root)
    before = history(root)
    assert len(before) == 3
    assert main(["add", str(root), str(paths["b3"])]) == 0
    env = dict(os.environ)
    log = root.parent / "killed-refit.log"
    with open(log, "wb") as err_file:
        proc = subprocess.Popen(
            [sys.executable, "-m", "halo.cli", "refit", str(root), "--quiet"],
            env=env, stdout=subprocess.DEVNULL, stderr=err_file,
            cwd=root.parent,  # not the source tree: ./halo there would shadow the install
        )  # fmt: skip
    partial = root / "runs" / ".partial-0004"
    deadline = time.time() + 120
    while time.time() < deadline and not (partial / "stars-only" / "posterior.nc").exists():
        assert proc.poll() is None, log.read_text()
        time.sleep(0.2)
    assert partial.exists(), "the refit never started fitting"
    # while it runs the workspace is locked: a second writer is refused with a clear message
    assert main(["add", str(root), str(paths["b3"])]) == 2
    assert "busy" in capsys.readouterr().err
    proc.send_signal(signal.SIGKILL)
    proc.wait(timeout=30)
    # everything from before is intact and readable
    assert history(root) == before
    _objects_intact(ws)
    for r in before:
        json.loads((root / "runs" / r["folder"] / "summary.json").read_text())
    assert ws.latest_catalogue()["n_stars"] == 80
    assert any("newer" in s for s in status(root)["stale"])
    # the next refit cleans up and completes
    assert main(["refit", str(root), "--quiet"]) == 0
    assert not partial.exists()
    rows = history(root)
    assert [r["n_stars"] for r in rows] == [45, 65, 65, 80]
    capsys.readouterr()
    assert main(["history", str(root), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert len(out["runs"]) == 4
    assert main(["history", str(root)]) == 0
    assert (Path(root) / "history.png").stat().st_size > 10_000


def test_replace_keeps_the_old_version(workspace, capsys):
    root, paths = workspace
    ws = Workspace(root)
    old = ws.latest_catalogue()
    assert main(["add", str(root), str(paths["conflict"]), "--replace"]) == 0
    assert "1 replaced" in capsys.readouterr().out
    new = ws.latest_catalogue()
    assert new["seq"] == old["seq"] + 1 and new["n_rows"] == old["n_rows"]
    assert ws.catalogue_path(old["sha256"]).is_file()  # still retrievable
    _objects_intact(ws)


def test_export_latest_run(workspace, tmp_path, capsys):
    from astropy.table import Table

    root, _ = workspace
    out = tmp_path / "deliver"
    assert main(["export", str(root), "--out", str(out), "--angles-deg", "0.3"]) == 0
    assert "runs/0004" in capsys.readouterr().out
    t = Table.read(out / "jd_factors.ecsv", format="ascii.ecsv")
    assert set(t["model"]) == {"nfw"}
    assert list(t["angle_label"]) == ["0.1", "0.2", "0.3", "0.5", "2rh"]
    # the fit's own numbers: the preferred rows equal summary.json's log10 J and D per cone
    run = json.loads((out / "summary.json").read_text())["models"]["nfw"]
    assert list(t["preferred"]) == [True] * 5 and set(t["converged"]) == {run["converged"]}
    for row in t[t["angle_label"] != "0.3"]:
        for kind in ("j", "d"):
            q = run["derived"][f"log10_{kind}"][row["angle_label"]]
            for k in ("median", "p2.5", "std"):
                col = f"log10_{kind}_{k.replace('.', '_')}"
                assert row[col] == pytest.approx(q[k], rel=1e-13)
    assert (out / "nfw_dj_domega.fits").is_file() and (out / "summary.json").is_file()
    assert main(["export", str(root), "--out", str(out)]) == 2  # never overwrites


def test_forecast_from_a_workspace_uses_its_latest_run(workspace, tmp_path, capsys, monkeypatch):
    """`halo forecast WORKSPACE` forecasts from the latest run, keeping the stars of the catalogue
    version that run fitted (the fits themselves are stopped before they start: the forecast
    tests run them)."""
    from astropy.table import Table

    import halo.batch.forecast_report as forecast_report

    def stop(*args, **kwargs):
        raise InputError("stopped before the future fits (test)")

    monkeypatch.setattr(forecast_report, "run_batch", stop)
    root, _ = workspace
    out = tmp_path / "fc"
    code = main(["forecast", str(root), "--out", str(out), "--plan", "+5",
                 "--draws-per-plan", "1", "--workers", "1"])  # fmt: skip
    err = capsys.readouterr().err
    assert code == 2 and "stopped before the future fits" in err
    assert "latest run" in err and "runs/0004" in err
    run = json.loads((root / "runs" / "0004" / "summary.json").read_text())
    mocks = sorted((out / "mocks").glob("*.ecsv"))
    assert len(mocks) == 1
    future = Table.read(mocks[0], format="ascii.ecsv")
    assert len(future) == run["catalogue"]["n_rows"] + 5
