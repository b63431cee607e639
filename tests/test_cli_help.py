"""The command line's wording: model names in any case."""

import json

from halo.cli.app import main


def run(capsys, monkeypatch, *args):
    monkeypatch.setenv("COLUMNS", "200")  # wide: no word is split by the wrapping
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err


PREDICT = ["predict", "demo", "--set", "m200=1e9", "--set", "c200=20", "--set", "beta=0"]
PREDICT += ["--radii-pc", "30", "--angles-deg", "0.5", "--json"]


def test_model_names_in_any_case(capsys, monkeypatch, tmp_path):
    code, lower, err = run(capsys, monkeypatch, *PREDICT, "--model", "nfw")
    assert code == 0, err
    for name in ("NFW",):
        code, out, err = run(capsys, monkeypatch, *PREDICT, "--model", name)
        assert code == 0, err
        assert json.loads(out) == json.loads(lower)
    code, out, err = run(capsys, monkeypatch, *PREDICT, "--model", "NFX")
    assert code == 2 and "unknown model 'NFX'" in err and "nfw" in err
    # a workspace records the shipped spelling of a name given in another case
    ws = tmp_path / "ws"
    code, out, err = run(
        capsys, monkeypatch, "init", str(ws), "--satellite", "demo", "--model", "Cored"
    )
    assert code == 0, err
    code, out, err = run(capsys, monkeypatch, "status", str(ws), "--json")
    assert code == 0, err
    assert "cored" in out and "Cored" not in out


def test_path_is_never_matched_by_case(capsys, monkeypatch, tmp_path):
    # a path stays a path: a missing NFW.toml is a missing file, not the shipped nfw
    code, _, err = run(capsys, monkeypatch, *PREDICT, "--model", str(tmp_path / "NFW.toml"))
    assert code == 2 and "NFW.toml" in err and "no such model spec file" in err
