"""Refits that say what they do: an edited satellite file is a new version and is refit, status
and --force name the warm start they will make (short or full warmup), a warm start that cannot
read the earlier run falls back to a cold start said on stderr and recorded in summary.json, and
Ctrl-C (SIGINT) of `halo refit` or `halo fit` exits 130 with a message, leaving nothing unfinished.

One small workspace (12 stars, the stars-only model, 2 chains x 150 + 150, no binaries, no
foreground): the point is the bookkeeping, not the posterior. The tests run in file order on it.
"""

import hashlib
import json
import os
import signal
import subprocess
import sys
import time

import pytest
from fit_setup import NO_EXTRAS, field_catalogue, fit_command, tiny_chains, write_testa

from halo.cli.app import main
from halo.workspace.record import Workspace
from halo.workspace.views import history, status

FIT = [*tiny_chains(2), *NO_EXTRAS]


def _catalogue(path, ids, seed):
    return field_catalogue(path, ids, seed, 8.0, 1.5)


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("wsrefit")
    sat = write_testa(tmp / "sat.toml", "Testa I")
    paths = {
        "sat": sat,
        "b1": _catalogue(tmp / "b1.ecsv", [f"s{i}" for i in range(12)], 1),
        "b2": _catalogue(tmp / "b2.ecsv", ["n1", "n2"], 2),
        "b3": _catalogue(tmp / "b3.ecsv", ["m1"], 3),
    }
    root = tmp / "W"
    assert main(["init", str(root), "--satellite", str(sat), "--model", "stars-only"]) == 0
    assert main(["add", str(root), str(paths["b1"])]) == 0
    assert main(["refit", str(root), *FIT, "--quiet"]) == 0
    return root, paths


def _summary(root, seq):
    return json.loads((root / "runs" / f"{seq:04d}" / "summary.json").read_text())


def test_edited_satellite_file_is_a_new_version_and_refit(fitted, capsys):
    root, paths = fitted
    ws = Workspace(root)
    assert status(root)["up_to_date"]
    text = paths["sat"].read_text().replace("distance_kpc = 45.0", "distance_kpc = 47.0")
    paths["sat"].write_text(text)
    st = status(root)
    assert not st["up_to_date"]
    assert any("the satellite file changed" in s for s in st["stale"]), st["stale"]
    # the earlier run did not converge (tiny chains): the warm start runs the full warmup
    assert st["next"] == {"stars-only": "warm-full"}
    assert "full warmup: the earlier run did not converge" in st["next_text"]["stars-only"]
    capsys.readouterr()
    assert main(["status", str(root)]) == 0
    out = capsys.readouterr().out
    assert "stale: the satellite file changed" in out and "full warmup" in out
    assert main(["refit", str(root), "--quiet"]) == 0
    new_sha = hashlib.sha256(text.encode()).hexdigest()
    assert ws.latest_satellite()["seq"] == 2 and ws.latest_satellite()["sha256"] == new_sha
    assert ws.runs_list()[-1]["satellite_sha256"] == new_sha
    assert _summary(root, 2)["satellite_sha256"] == new_sha
    assert status(root)["up_to_date"]


def test_force_says_it_refits(fitted, capsys):
    root, _ = fitted
    capsys.readouterr()
    assert main(["refit", str(root), "--force", *FIT]) == 0
    err = capsys.readouterr().err
    assert "unchanged, reusing" not in err
    assert "stars-only: refit (warm start from run 0002; full warmup" in err
    assert _summary(root, 3)["models"]["stars-only"]["reused_from"] is None


def test_unreadable_earlier_run_falls_back_to_a_cold_start_said_and_recorded(fitted, capsys):
    root, paths = fitted
    (root / "runs" / "0003" / "stars-only" / "posterior.nc").write_bytes(b"not netCDF")
    assert main(["add", str(root), str(paths["b2"])]) == 0  # two new stars: a valid batch
    capsys.readouterr()
    assert main(["refit", str(root), *FIT]) == 0
    err = capsys.readouterr().err
    assert "cannot warm-start from" in err and "cold start" in err
    assert "the warm start from" in err and "fitted from a cold start" in err
    w = _summary(root, 4)["models"]["stars-only"]["warm_start"]
    assert w["fallback"] == "cold start" and "cannot read its posterior" in w["reason"]
    assert w["warmup"] == 150


def _interrupt(args, cwd, log):
    """Run ``python -m halo.cli ARGS``, send SIGINT once it is sampling; (exit code, stderr)."""
    with open(log, "wb") as err_file:
        proc = subprocess.Popen(
            [sys.executable, "-m", "halo.cli", *args], stdout=subprocess.DEVNULL,
            stderr=err_file, cwd=cwd, env=dict(os.environ),
        )  # fmt: skip
    deadline = time.time() + 180
    while time.time() < deadline and "sampling" not in log.read_text():
        assert proc.poll() is None, log.read_text()
        time.sleep(0.2)
    proc.send_signal(signal.SIGINT)
    code = proc.wait(timeout=180)
    return code, log.read_text()


def test_sigint_during_a_refit_exits_130_and_cleans_up(fitted):
    root, paths = fitted
    before = history(root)
    assert main(["add", str(root), str(paths["b3"])]) == 0
    code, err = _interrupt(["refit", str(root), *FIT], root.parent, root.parent / "int.log")
    assert code == 130, err
    assert "halo: interrupted" in err.splitlines()[-1]
    assert not list((root / "runs").glob(".partial-*"))
    assert history(root) == before
    assert not status(root)["up_to_date"]  # the new star still waits for a refit


def test_sigint_during_a_fit_exits_130_and_removes_its_folder(fitted):
    root, paths = fitted
    out = root.parent / "fit-out"
    args = [*fit_command(paths["b1"], paths["sat"], out, "stars-only"), *FIT]
    code, err = _interrupt(args, root.parent, root.parent / "fit.log")
    assert code == 130, err
    assert "halo: interrupted" in err.splitlines()[-1]
    assert not out.exists()
