"""A refit reuses the stars-only comparator only when it would share the same binaries.

The stars-only model takes its binary population and binary-fraction prior from the dark specs'
``[binaries]`` table (halo.pipeline.fit.shared_binaries). Its own spec file does not change when
a dark spec's table does, so a refit that reused it by its spec alone would compare two
likelihoods: the reuse must look at the table it shares too.

One small workspace (12 stars, nfw + stars-only, 1 chain x 60 + 60, binaries on, no
foreground): the point is the bookkeeping, not the posterior.
"""

import json
from importlib import resources

import numpy as np
from astropy.table import Table

from halo.cli.app import main
from halo.workspace.views import status

FIT = ["--chains", "1", "--warmup", "60", "--draws", "60", "--no-foreground", "--quiet"]
SATELLITE = """name = "Shared binaries refit"
ra_deg = 33.0
dec_deg = 14.0
distance_kpc = 50.0
distance_err_kpc = 2.5
r_half_pc = 35.0
r_half_err_pc = 3.5
stellar_mass_msun = 5000.0
stellar_mass_err_msun = 1500.0
"""
NFW = resources.files("halo.models").joinpath("nfw.toml").read_text(encoding="utf-8")


def _catalogue(path, n, seed):
    rng = np.random.default_rng(seed)
    t = Table()
    t["id"] = [f"s{i}" for i in range(n)]
    t["ra"] = 33.0 + rng.uniform(-0.02, 0.02, n)
    t["dec"] = 14.0 + rng.uniform(-0.02, 0.02, n)
    t["vlos"] = rng.normal(-40.0, 4.0, n)
    t["vlos_err"] = np.full(n, 1.0)
    t.write(path, format="ascii.ecsv")
    return path


def _summary(root, seq):
    return json.loads((root / "runs" / f"{seq:04d}" / "summary.json").read_text())


def test_changed_dark_binaries_refit_the_stars_only_comparator(tmp_path):
    sat = tmp_path / "sat.toml"
    sat.write_text(SATELLITE)
    root = tmp_path / "W"
    args = ["init", str(root), "--satellite", str(sat), "--model", "nfw", "--model", "stars-only"]
    assert main(args) == 0
    assert main(["add", str(root), str(_catalogue(tmp_path / "c.ecsv", 12, 1))]) == 0
    assert main(["refit", str(root), *FIT]) == 0
    first = _summary(root, 1)
    assert first["comparison"]["binaries"]["spec_table"] == {}

    # the nfw spec gains a [binaries] table of its own (same model name): the stars-only spec is
    # unchanged, but the table it must share is not, so it cannot be reused
    (tmp_path / "nfw.toml").write_text(NFW + "\n[binaries]\nfraction = [0.0, 0.3]\n")
    assert main(["refit", str(root), *FIT, "--model", str(tmp_path / "nfw.toml")]) == 0
    second = _summary(root, 2)
    assert second["models"]["stars-only"]["reused_from"] is None
    assert second["comparison"]["binaries"]["fraction_range"] == [0.0, 0.3]

    # nothing changed since: both models are reused as they are
    assert status(root)["next"] == {"nfw": "reuse", "stars-only": "reuse"}
