"""The command line's help and wording: units kept in --help, values named by what they are
(FILE, N, LIST, ...) rather than by Python types, --version, commands in workflow order,
model names in any case, errors that name the flags."""

import json
import re
import subprocess
import sys
from importlib import metadata

import pytest
import typer

from halo.cli.app import app, main

COMMANDS = ["demo", "fit", "mock", "predict", "models", "init", "add", "refit", "status"]
COMMANDS += ["history", "export", "batch", "calibrate", "forecast"]

# options whose value has a unit, and the unit as its help text states it
UNITS = {
    ("predict", "--radii-pc"): "[pc]",
    ("predict", "--angles-deg"): "[deg]",
    ("predict", "--set"): "[Msun]",
    ("mock", "--v-sys"): "[km/s]",
    ("mock", "--errors"): "[km/s]",
    ("mock", "--epochs"): "[MJD, d]",
    ("mock", "--set"): "[Msun]",
    ("export", "--angles-deg"): "[deg]",
}

TYPE_METAVAR = re.compile(r"<(bool|str|int|float|path|list\[[a-z]+\]|[a-z]+\|[a-z|]+)>")


def run(capsys, monkeypatch, *args):
    monkeypatch.setenv("COLUMNS", "200")  # wide: no word is split by the wrapping
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err


def squeeze(text):
    return "".join(text.split())


def params(command):
    """The command's options and arguments as declared in the source (hidden ones left out)."""
    group = typer.main.get_command(app)
    return [p for p in group.commands[command].params if not getattr(p, "hidden", False)]


def option_row(out, opt):
    """The help text of one option: from its name to the next option's row."""
    m = re.search(rf"^  {re.escape(opt)}\b.*?(?=^  -|\Z)", out, flags=re.M | re.S)
    assert m, f"{opt} not in the help"
    return m.group(0)


@pytest.mark.parametrize("command", COMMANDS)
def test_help_keeps_every_text_with_its_units_and_no_type_noise(capsys, monkeypatch, command):
    code, out, err = run(capsys, monkeypatch, command, "--help")
    assert code == 0, err
    assert not TYPE_METAVAR.search(out), TYPE_METAVAR.search(out).group(0)
    for p in params(command):
        # the whole help text, brackets included (a markup renderer deleted "[pc]")
        assert squeeze(p.help) in squeeze(out), (command, p.name, p.help)
        if p.param_type_name == "argument":
            assert p.metavar and p.metavar.isupper() and p.metavar in out, (command, p.name)
            continue
        opt = p.opts[0]
        if not p.is_flag:  # a value option shows what the value is: FILE, N, LIST, KM/S...
            assert p.metavar, (command, opt)
            assert f"{opt} {p.metavar}" in out, (command, opt)
        unit = UNITS.get((command, opt))
        if unit:
            assert unit in p.help, (command, opt)
            assert squeeze(unit) in squeeze(option_row(out, opt)), (command, opt)
    assert {c for c, _ in UNITS} <= set(COMMANDS)


def test_help_rows_not_split_at_hyphens(capsys, monkeypatch):
    monkeypatch.setenv("COLUMNS", "60")  # narrow: wrapped, but only at spaces
    main(["fit", "--help"])
    out = capsys.readouterr().out
    assert "baes-van-hese" in out and "osipkov-merritt" in out


def test_version(capsys, monkeypatch):
    want = f"halo {metadata.version('halo-dynamics')}\n"
    for flag in ("--version", "-V"):
        code, out, err = run(capsys, monkeypatch, flag)
        assert (code, out, err) == (0, want, "")
    # the same through the module entry point, as a user runs it
    res = subprocess.run(
        [sys.executable, "-m", "halo.cli", "--version"], capture_output=True, text=True, timeout=120
    )
    assert (res.returncode, res.stdout) == (0, want), res.stderr


def test_commands_listed_in_workflow_order(capsys, monkeypatch):
    code, out, _ = run(capsys, monkeypatch, "--help")
    assert code == 0
    section = out.split("Commands:", 1)[1]
    listed = re.findall(r"^  ([a-z]+)\s", section, flags=re.M)
    assert listed == COMMANDS
    assert "--version" in out


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


def test_mock_refusal_names_the_flag(capsys, monkeypatch, tmp_path):
    out_file = tmp_path / "m.ecsv"
    args = ["mock", "demo", "--out", str(out_file), "--method", "df", "--n-stars", "5"]
    args += ["--set", "m200=1e9", "--set", "c200=15", "--set", "beta=0.3"]
    code, _, err = run(capsys, monkeypatch, *args)
    assert code == 2 and "--method gaussian" in err, err
    assert "method='" not in err and not out_file.exists()
