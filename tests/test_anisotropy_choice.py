"""--anisotropy KIND: any spec with another anisotropy and its default priors, for fit, refit,
predict and mock, listed by `halo models`; in a workspace the choice decides reuse and warm
starts."""

import json

import numpy as np
import pytest
from astropy.table import Table

from halo.cli.app import main
from halo.inputs.spec import available_specs, load_spec, parse_spec
from halo.inputs.spec_anisotropy import ANISOTROPY_PRIORS, with_anisotropy
from halo.physics.anisotropy import ANISOTROPIES
from halo.pipeline.demo import demo_satellite_path
from halo.pipeline.settings import FitSettings
from halo.products.rundir import posterior_path
from halo.workspace.catalogues import add_catalogue
from halo.workspace.create import init_workspace
from halo.workspace.planning import plan

NFW = ["--model", "nfw", "--set", "m200=1e9", "--set", "c200=20"]
OM_SPEC = (
    'dark_profile = "nfw"\nanisotropy = "osipkov-merritt"\n'
    '[parameters.m200]\nprior = "log-uniform"\nlow = 1e5\nhigh = 1e11\n'
    '[parameters.c200]\nprior = "concentration"\nrelation = "dutton14"\n'
    '[parameters.r_a]\nprior = "log-uniform"\nlow = 0.001\nhigh = 10.0\n'
)


def _json(capsys, args):
    code = main(args)
    out, err = capsys.readouterr()
    assert code == 0, err
    return json.loads(out)


def test_predict_with_set_r_a_matches_an_osipkov_merritt_spec(capsys, tmp_path):
    spec = tmp_path / "om.toml"
    spec.write_text(OM_SPEC)
    rest = ["--set", "m200=1e9", "--set", "c200=20", "--set", "r_a=0.05", "--json"]
    chosen = _json(
        capsys, ["predict", "demo", "--model", "nfw", "--anisotropy", "osipkov-merritt", *rest]
    )
    own = _json(capsys, ["predict", "demo", "--model", str(spec), *rest])
    np.testing.assert_allclose(chosen["sigma_los_kms"], own["sigma_los_kms"], rtol=1e-12)
    iso = _json(capsys, ["predict", "demo", *NFW, "--json"])
    assert not np.allclose(chosen["sigma_los_kms"], iso["sigma_los_kms"], rtol=1e-3)


def test_unknown_kind_is_refused(capsys):
    assert main(["predict", "demo", *NFW, "--anisotropy", "radial"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--anisotropy" in err[0] and "osipkov-merritt" in err[0]


def test_every_kind_gives_every_spec_a_valid_spec():
    assert set(ANISOTROPY_PRIORS) == set(ANISOTROPIES)
    for name in available_specs():
        spec = load_spec(name)
        for kind in ANISOTROPY_PRIORS:
            new = with_anisotropy(spec, kind)
            data = {
                "dark_profile": new.dark_profile,
                "anisotropy": new.anisotropy,
                "parameters": new.parameters,
            }
            again = parse_spec(data, name, "x.toml")  # the checks of a spec file
            assert again.anisotropy == kind
            assert set(ANISOTROPY_PRIORS[kind]) <= set(again.parameters)


def test_models_lists_the_kinds(capsys):
    assert main(["models"]) == 0
    out = capsys.readouterr().out
    tail = out[out.index("anisotropy kinds") :]
    for kind in ANISOTROPY_PRIORS:
        assert kind in tail
    assert "r_a" in tail and "eta" in tail


def test_mock_with_osipkov_merritt(capsys, tmp_path):
    out = tmp_path / "m.ecsv"
    args = ["mock", "demo", "--out", str(out), *NFW, "--set", "r_a=0.5", "--n-stars", "30"]
    assert main([*args, "--anisotropy", "osipkov-merritt", "--method", "gaussian"]) == 0
    truth = json.loads(out.with_suffix(".ecsv.truth.json").read_text())
    assert truth["parameters"]["r_a"] == 0.5


def _workspace_with_a_run(tmp_path):
    root = tmp_path / "W"
    ws = init_workspace(root, demo_satellite_path(), models=["nfw"])
    t = Table()
    t["id"] = ["a", "b", "c", "d"]
    t["ra"] = 151.25 + 1e-3 * np.arange(4)
    t["dec"] = np.full(4, -23.4)
    t["vlos"] = [60.0, 62.0, 58.0, 61.0]
    t["vlos_err"] = np.full(4, 1.5)
    t.write(tmp_path / "c.ecsv", format="ascii.ecsv")
    add_catalogue(root, tmp_path / "c.ecsv")
    p = plan(ws, FitSettings())
    ws.record_run(
        {
            "seq": 1,
            "folder": "0001",
            "started": "x",
            "finished": "x",
            "catalogue_seq": p["catalogue"]["seq"],
            "catalogue_sha256": p["catalogue"]["sha256"],
            "satellite_sha256": p["satellite"]["sha256"],
            "specs": p["specs"],
            "settings": p["settings"],
            "inputs_key": p["inputs_key"],
            "wall_s": 1.0,
            "reused": {},
            "headline": {"n_stars": 4, "models": {}},
            "version": "x",
        }
    )
    for name in p["specs"]:
        post = posterior_path(ws.runs / "0001", name)
        post.parent.mkdir(parents=True, exist_ok=True)
        post.write_bytes(b"")
    return ws


def test_workspace_anisotropy_choice_decides_reuse_and_warm_start(tmp_path):
    ws = _workspace_with_a_run(tmp_path)
    same = plan(ws, FitSettings())
    assert same["up_to_date"] and same["models"]["nfw"][0] == "reuse"
    other = plan(ws, FitSettings(anisotropy="osipkov-merritt"))
    assert not other["up_to_date"]
    assert other["models"]["nfw"][0] == "fit"  # no warm start from another anisotropy
    assert other["settings"]["anisotropy"] == "osipkov-merritt"
    assert "anisotropy" not in same["settings"]  # earlier runs' settings stay comparable


@pytest.mark.parametrize("value", ["spec", None])
def test_spec_means_each_specs_own(value):
    assert FitSettings(anisotropy=value).anisotropy is None


def test_fit_with_osipkov_merritt(capsys, tmp_path):
    cat = tmp_path / "m.ecsv"
    args = ["mock", "demo", "--out", str(cat), *NFW, "--n-stars", "25", "--method", "gaussian"]
    assert main(args) == 0
    out = tmp_path / "fit"
    args = ["fit", str(cat), "demo", "--out", str(out), "--model", "nfw", "--no-binaries"]
    args += ["--chains", "2", "--warmup", "100", "--draws", "100", "--quiet"]
    assert main([*args, "--anisotropy", "osipkov-merritt"]) == 0, capsys.readouterr().err
    summary = json.loads((out / "summary.json").read_text())
    assert summary["settings"]["anisotropy"] == "osipkov-merritt"
    for name in ("nfw", "stars-only"):
        params = summary["models"][name]["parameters"]
        assert "r_a" in params and "beta" not in params
