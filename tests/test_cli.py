"""Command line: listing models, predictions, and one-line errors with exit code 2."""

import json
import os
import subprocess
import sys
from pathlib import Path

import jax.numpy as jnp
import numpy as np
import pytest

from halo.cli.app import main
from halo.inputs.satellite import read_satellite
from halo.physics.anisotropy import Constant
from halo.physics.cosmology import rho_crit
from halo.physics.dark import NFW
from halo.physics.jeans import sigma_los
from halo.physics.jfactor import log10_j
from halo.physics.mass import MassModel, Stars
from halo.pipeline.demo import demo_satellite_path


def run(capsys, *args):
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err


def test_models_lists_every_spec(capsys):
    code, out, _ = run(capsys, "models", "--json")
    assert code == 0
    obj = json.loads(out)
    assert {"nfw", "cored", "zhao", "einasto", "stars-only"} <= set(obj)
    assert obj["stars-only"]["dark_profile"] == "none"
    code, out, _ = run(capsys, "models")
    assert code == 0 and "m200" in out and "stars-only" in out


def test_predict_json_matches_library(capsys):
    code, out, err = run(
        capsys,
        "predict",
        "demo",
        "--model",
        "nfw",
        "--set",
        "m200=1e9",
        "--set",
        "c200=20",
        "--set",
        "beta=0.2",
        "--radii-pc",
        "10,30,90",
        "--angles-deg",
        "0.1,0.5",
        "--json",
    )
    assert code == 0, err
    res = json.loads(out)
    for key in (
        "radii_pc",
        "sigma_los_kms",
        "mass_enclosed_msun",
        "angles_deg",
        "log10_j",
        "log10_d",
    ):
        assert key in res
    sat = read_satellite(demo_satellite_path())
    light = sat.light()
    halo = NFW.from_m200_c200(1e9, 20.0, rho_c=rho_crit())
    model = MassModel((halo, Stars(light, sat.stellar_mass_msun)))
    R = jnp.array([10.0, 30.0, 90.0]) * 1e-3
    np.testing.assert_allclose(
        res["sigma_los_kms"], sigma_los(model, light, Constant(0.2), R), rtol=1e-10
    )
    np.testing.assert_allclose(res["mass_enclosed_msun"], model.mass(R), rtol=1e-10)
    np.testing.assert_allclose(
        res["log10_j"], log10_j(halo, sat.distance_kpc, jnp.array([0.1, 0.5])), rtol=1e-10
    )
    assert res["radii_pc"] == [10.0, 30.0, 90.0]


def test_predict_table_and_stars_only(capsys):
    code, out, _ = run(capsys, "predict", "demo", "--model", "stars-only")
    assert code == 0
    assert "sigma_los" in out and "log10 J" in out
    code, out, _ = run(capsys, "predict", "demo", "--model", "stars-only", "--json")
    res = json.loads(out)
    assert res["log10_j"] is None and res["log10_d"] is None
    assert all(s > 0 for s in res["sigma_los_kms"])


def test_predict_other_parametrisation_and_anisotropy(capsys, tmp_path):
    spec = tmp_path / "om.toml"
    spec.write_text(
        'dark_profile = "nfw"\nanisotropy = "osipkov-merritt"\n'
        '[parameters.rho_s]\nprior = "log-uniform"\nlow = 1e5\nhigh = 1e10\n'
        '[parameters.r_s]\nprior = "log-uniform"\nlow = 0.01\nhigh = 10.0\n'
        '[parameters.r_a]\nprior = "log-uniform"\nlow = 0.001\nhigh = 10.0\n'
    )
    code, out, err = run(
        capsys,
        "predict",
        "demo",
        "--model",
        str(spec),
        "--set",
        "rho_s=3e7",
        "--set",
        "r_s=0.5",
        "--set",
        "r_a=0.05",
        "--json",
    )
    assert code == 0, err
    assert len(json.loads(out)["sigma_los_kms"]) == 5


BAD = [
    (["predict", "demo", "--model", "nope", "--set", "m200=1e9"], "unknown model"),
    (
        [
            "predict",
            "demo",
            "--model",
            "nfw",
            "--set",
            "m200=1e9",
            "--set",
            "c200=20",
            "--set",
            "foo=1",
        ],
        "unknown parameter 'foo'",
    ),
    (["predict", "demo", "--model", "nfw", "--set", "m200=1e9"], "m200 and c200"),
    (["predict", "demo", "--model", "nfw", "--set", "m200=-1e9", "--set", "c200=20"], "positive"),
    (
        [
            "predict",
            "demo",
            "--model",
            "nfw",
            "--set",
            "m200=1e9",
            "--set",
            "c200=20",
            "--radii-pc",
            "10,-3",
        ],
        "--radii-pc",
    ),
    (["predict", "demo", "--model", "nfw", "--set", "m200", "--set", "c200=20"], "KEY=VALUE"),
    (
        ["predict", "demo", "--model", "nfw", "--set", "m200=abc", "--set", "c200=20"],
        "expected a number",
    ),
    (
        [
            "predict",
            "demo",
            "--model",
            "nfw",
            "--set",
            "m200=1e9",
            "--set",
            "c200=20",
            "--set",
            "beta=1.5",
        ],
        "beta",
    ),
    (["predict", "missing.toml", "--model", "nfw"], "no such file"),
    (["frobnicate"], "No such command"),
]


@pytest.mark.parametrize("args,needle", BAD)
def test_bad_input_exit_2_one_line(capsys, args, needle):
    code, out, err = run(capsys, *args)
    assert code == 2
    assert needle in err
    assert len(err.strip().splitlines()) == 1
    assert "Traceback" not in err


def test_malformed_satellite_and_spec(capsys, tmp_path):
    sat = tmp_path / "bad.toml"
    sat.write_text("name = 'x'\nra_deg = [\n")
    code, _, err = run(capsys, "predict", str(sat), "--model", "nfw")
    assert code == 2 and "malformed TOML" in err and str(sat) in err
    sat.write_text(Path(demo_satellite_path()).read_text() + "\ncolour = 'red'\n")
    code, _, err = run(
        capsys, "predict", str(sat), "--model", "nfw", "--set", "m200=1e9", "--set", "c200=20"
    )
    assert code == 2 and "unknown key 'colour'" in err
    spec = tmp_path / "broken.toml"
    spec.write_text("dark_profile = 'nfw'\nanisotropy = 'constant'\n[parameters.m200\n")
    code, _, err = run(capsys, "predict", "demo", "--model", str(spec))
    assert code == 2 and "malformed TOML" in err


def test_console_script_exit_codes(tmp_path):
    # the installed entry point, as a user runs it: no traceback, exit 2, one line
    exe = Path(sys.executable).with_name("halo")
    env = dict(os.environ, MPLCONFIGDIR=str(tmp_path))
    res = subprocess.run(
        [str(exe), "predict", "demo", "--model", "nfw", "--set", "c200=3"],
        capture_output=True,
        text=True,
        env=env,
        timeout=300,
    )
    assert res.returncode == 2
    assert "Traceback" not in res.stderr and len(res.stderr.strip().splitlines()) == 1


MOCK = ["mock", "demo", "--model", "cored", "--set", "m200=1e9", "--set", "c200=15"]
MOCK += ["--set", "r_c=0.05", "--set", "n=1", "--n-stars", "20", "--seed", "4"]


def test_mock_foreground_count_new_and_old_spelling(capsys, tmp_path):
    # `halo mock --n-foreground N` is a count; `--foreground N`, its old name, stays for one
    # version, hidden from the help and with a note on stderr
    new, old = tmp_path / "new.ecsv", tmp_path / "old.ecsv"
    code, out, err = run(capsys, *MOCK, "--out", str(new), "--n-foreground", "5")
    assert code == 0, err
    assert "(20 stars + 5 foreground)" in out and err == ""
    code, out, err = run(capsys, *MOCK, "--out", str(old), "--foreground", "5")
    assert code == 0, err
    assert "(20 stars + 5 foreground)" in out and "--n-foreground" in err
    assert old.read_bytes() == new.read_bytes()
    code, _, err = run(capsys, *MOCK, "--out", str(tmp_path / "x.ecsv"), "--n-foreground", "-1")
    assert code == 2 and "--n-foreground" in err
    code, _, err = run(
        capsys, *MOCK, "--out", str(tmp_path / "y.ecsv"), "--foreground", "5", "--n-foreground", "4"
    )
    assert code == 2 and "disagree" in err
    code, out, _ = run(capsys, "mock", "--help")
    assert code == 0 and "--n-foreground" in out and "--foreground" not in out
