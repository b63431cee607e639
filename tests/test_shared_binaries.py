"""Every model of a comparison shares the binary population and binary-fraction prior.

A Bayes factor against stars only compares two likelihoods of the same data only when both
treat the binaries alike: the stars-only comparator takes the dark specs' ``[binaries]`` table,
dark specs that disagree are refused before any sampling, and summary.json records what the
models share (``comparison``).
"""

from importlib import resources

import pytest
from fit_setup import (
    CLUSTER,
    cluster_mock,
    fit_command,
    tiny_chains,
    tiny_settings,
    write_satellite,
)

from halo.cli.app import main
from halo.inputs.catalogue import stars_from_table
from halo.inputs.satellite import parse_satellite
from halo.pipeline.fit import fit

SAT = {**CLUSTER, "name": "Shared binaries"}
NFW = resources.files("halo.models").joinpath("nfw.toml").read_text(encoding="utf-8")


def _spec(tmp_path, name, fraction):
    path = tmp_path / f"{name}.toml"
    path.write_text(NFW + f"\n[binaries]\nfraction = {fraction}\n", encoding="utf-8")
    return path


def _write_inputs(tmp_path):
    mock = cluster_mock(SAT, 20, 5)
    cat = tmp_path / "cat.ecsv"
    mock.table.write(cat, format="ascii.ecsv")
    return cat, write_satellite(tmp_path / "sat.toml", SAT), mock


def test_disagreeing_dark_specs_are_refused_before_sampling(tmp_path, capsys):
    cat, sat, _ = _write_inputs(tmp_path)
    a = _spec(tmp_path, "nfw_low", "[0.0, 0.2]")
    b = _spec(tmp_path, "nfw_high", "[0.3, 0.9]")
    out = tmp_path / "out"
    args = [*fit_command(cat, sat, out, a, b), *tiny_chains(1, 50, 50)]
    assert main(args) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) >= 1 and err[-1].startswith("halo: error: ")
    assert "nfw_low.toml" in err[-1] and "nfw_high.toml" in err[-1]
    assert "sampling" not in "".join(err)
    assert not (out / "summary.json").exists()


def test_stars_only_takes_the_dark_specs_binary_fraction_prior(tmp_path):
    _, _, mock = _write_inputs(tmp_path)
    sat = parse_satellite(SAT)
    stars = stars_from_table(mock.table, sat, source="shared-binaries")
    spec = _spec(tmp_path, "nfw_low", "[0.0, 0.2]")
    settings = tiny_settings(150, 150, 2)
    summary = fit(stars, sat, tmp_path / "out", [str(spec)], settings)
    shared = summary["comparison"]["binaries"]
    assert shared["fraction_range"] == [0.0, 0.2]
    assert shared["population"]["log_period_mean"] == pytest.approx(5.03)
    for name in ("nfw_low", "stars-only"):
        fb = summary["models"][name]["binary_fraction"]
        assert fb["p97.5"] <= 0.2 + 1e-12, name
    assert summary["comparison"]["foreground"] is None  # the mock has members only
