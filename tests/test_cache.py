"""halo keeps one user cache folder that survives a reboot: compiled programs (JAX's persistent
compilation cache) and matplotlib's font cache, in HALO_CACHE_DIR, else $XDG_CACHE_HOME/halo,
else ~/.cache/halo; a rerun loads its programs from there.

Each run is a fresh process (`python -m halo.cli`), as users run it, with HOME pointed into the
test's temporary folder (nothing is written under the real HOME).
"""

import json
import os
import subprocess
import sys

PREDICT = ["predict", "demo", "--model", "nfw", "--set", "m200=1e9", "--set", "c200=15"]
PREDICT += ["--set", "beta=0", "--radii-pc", "10,30", "--angles-deg", "0.5", "--json"]


def _run(tmp_path, **env):
    base = {k: v for k, v in os.environ.items() if k not in ("HALO_CACHE_DIR", "XDG_CACHE_HOME")}
    for k in ("JAX_COMPILATION_CACHE_DIR", "MPLCONFIGDIR"):
        base.pop(k, None)
    base["HOME"] = str(tmp_path / "home")
    proc = subprocess.run(
        [sys.executable, "-m", "halo.cli", *PREDICT],
        env={**base, **env},
        capture_output=True,
        text=True,
        timeout=600,
        cwd=tmp_path,
    )
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout)


def _entries(folder):
    """{compiled program's cache file: its modification time [ns]}."""
    jax_dir = folder / "jax"
    if not jax_dir.is_dir():
        return {}
    return {p.name: p.stat().st_mtime_ns for p in jax_dir.glob("*-cache")}


def test_default_cache_is_under_the_users_cache_folder_and_reused(tmp_path):
    # every program cached, however fast it compiled: with the default 0.2 s threshold a program
    # compiling in about that time was cached by one run and not the other (on a loaded machine)
    every = {"JAX_PERSISTENT_CACHE_MIN_COMPILE_TIME_SECS": "0"}
    first = _run(tmp_path, **every)
    folder = tmp_path / "home" / ".cache" / "halo"
    entries = _entries(folder)
    assert entries, "no compiled program was cached"
    second = _run(tmp_path, **every)
    assert second == first
    # the rerun compiled nothing: no cache file was added or rewritten, every program was loaded
    assert _entries(folder) == entries


def test_cache_folder_can_be_chosen(tmp_path):
    _run(tmp_path, XDG_CACHE_HOME=str(tmp_path / "xdg"))
    assert _entries(tmp_path / "xdg" / "halo")
    _run(tmp_path, HALO_CACHE_DIR=str(tmp_path / "mine"))
    assert _entries(tmp_path / "mine")
    assert not (tmp_path / "home" / ".cache").exists()
