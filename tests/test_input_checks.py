"""Inputs that used to give silent wrong results, or fail late, are refused up front with exit 2
and one line: option lists, cone angles, epochs without ids, the stellar mass given twice,
implausible values, empty catalogues, mock options, sampler settings and output folders."""

import os
from pathlib import Path

import pytest

from halo.cli.app import main
from halo.pipeline.demo import demo_catalogue_path, demo_satellite_path

NFW = ["--model", "nfw", "--set", "m200=1e9", "--set", "c200=20"]


def _refused(capsys, args, *needles):
    code = main(args)
    _, err = capsys.readouterr()
    assert code == 2, err
    line = err.strip().splitlines()[-1]
    assert line.startswith("halo: error: ") and "Traceback" not in err
    for needle in needles:
        assert needle in line
    return line


@pytest.mark.parametrize("radii", ["10 20", "10, 20 30"])
def test_radii_with_spaces_are_not_glued(capsys, radii):
    _refused(capsys, ["predict", "demo", *NFW, "--radii-pc", radii], "--radii-pc", radii)


def test_radii_with_spaces_around_commas_are_fine(capsys):
    assert main(["predict", "demo", *NFW, "--radii-pc", "10, 20", "--json"]) == 0
    assert '"radii_pc": [10.0, 20.0]' in capsys.readouterr().out


@pytest.mark.parametrize("angle", ["90", "180", "200"])
def test_cone_angles_below_90_deg(capsys, angle, tmp_path):
    _refused(capsys, ["predict", "demo", *NFW, "--angles-deg", angle], "--angles-deg", "90")
    out = tmp_path / "exp"
    _refused(capsys, ["export", str(tmp_path), "--out", str(out), "--angles-deg", angle], "90")
    assert not out.exists()


def _satellite(tmp_path, **changes):
    lines = []
    for line in Path(demo_satellite_path()).read_text().splitlines():
        key = line.split("=")[0].strip()
        if key in changes:
            if changes[key] is None:
                continue
            line = f"{key} = {changes.pop(key)}"
        lines.append(line)
    lines += [f"{k} = {v}" for k, v in changes.items() if v is not None]
    path = tmp_path / "sat.toml"
    path.write_text("\n".join(lines) + "\n")
    return path


def test_stellar_mass_given_twice(capsys, tmp_path):
    sat = _satellite(tmp_path, stellar_ml_v="[1.0, 3.0]")
    line = _refused(capsys, ["predict", str(sat), *NFW], str(sat), "stellar_mass_msun")
    assert "absolute_magnitude_v" in line and "stellar_ml_v" in line


@pytest.mark.parametrize(
    "key,value",
    [
        ("distance_kpc", "6e7"),
        ("distance_kpc", "1e-6"),
        ("distance_kpc", "60000"),
        ("stellar_mass_msun", "1e20"),
        ("r_half_pc", "1e-4"),
        ("galactocentric_distance_kpc", "48000"),
    ],
)
def test_implausible_satellite_values(capsys, tmp_path, key, value):
    sat = _satellite(tmp_path, **{key: value})
    _refused(capsys, ["predict", str(sat), *NFW], str(sat), key, "plausible range")


@pytest.mark.parametrize("item", ["m200=1e20", "stellar_mass=1e15", "m200=1e-3"])
def test_implausible_set_values(capsys, item):
    args = ["predict", "demo", "--model", "nfw", "--set", "c200=20", "--set", "m200=1e9"]
    _refused(capsys, [*args, "--set", item], "--set", item.split("=")[0], "plausible range")


@pytest.mark.parametrize("text,what", [("", "no columns"), ("ra,dec,vlos,vlos_err\n", "no rows")])
def test_empty_catalogue(capsys, tmp_path, text, what):
    cat = tmp_path / "c.csv"
    cat.write_text(text)
    out = tmp_path / "out"
    _refused(capsys, ["fit", str(cat), "demo", "--out", str(out)], str(cat), "empty file", what)
    assert not out.exists()


def test_epochs_without_an_id_column_are_refused(capsys, tmp_path):
    rows = ["ra,dec,vlos,vlos_err,mjd"]
    for k in range(6):
        ra = 151.25 + 0.001 * (k % 3)
        rows.append(f"{ra:.6f},-23.4,{60 + k},2.0,{60000 + 30 * k}")
    cat = tmp_path / "epochs.csv"
    cat.write_text("\n".join(rows) + "\n")
    args = ["fit", str(cat), "demo", "--out", str(tmp_path / "o")]
    _refused(capsys, args, str(cat), "rows 1 and 4", "no id column", "--column id=")


def test_mock_v_sys_nan_writes_nothing(capsys, tmp_path):
    out = tmp_path / "m.ecsv"
    _refused(capsys, ["mock", "demo", "--out", str(out), *NFW, "--v-sys", "nan"], "--v-sys")
    assert list(tmp_path.iterdir()) == []


def test_mock_negative_df_names_the_flag(capsys, tmp_path):
    spec = tmp_path / "om.toml"
    spec.write_text(
        'dark_profile = "nfw"\nanisotropy = "osipkov-merritt"\n'
        '[parameters.m200]\nprior = "log-uniform"\nlow = 1e5\nhigh = 1e11\n'
        '[parameters.c200]\nprior = "concentration"\nrelation = "dutton14"\n'
        '[parameters.r_a]\nprior = "log-uniform"\nlow = 0.001\nhigh = 10.0\n'
    )
    out = tmp_path / "m.ecsv"
    args = ["mock", "demo", "--out", str(out), "--model", str(spec), "--n-stars", "20"]
    args += ["--method", "df"]  # auto would fall back to the Gaussians, saying why
    args += ["--set", "m200=1e9", "--set", "c200=20", "--set", "r_a=0.003"]
    line = _refused(capsys, args, "--method gaussian")
    assert "method='gaussian'" not in line and not out.exists()


FIT = ["fit", str(demo_catalogue_path()), "demo"]


@pytest.mark.parametrize(
    "option,value", [("--draws", "20"), ("--warmup", "10"), ("--chains", "0"), ("--draws", "0")]
)
def test_impossible_sampler_settings_before_anything(capsys, tmp_path, option, value):
    out = tmp_path / "out"
    _refused(capsys, [*FIT, "--out", str(out), option, value], option, "at least")
    assert not out.exists()


def test_refit_impossible_settings(capsys, tmp_path):
    ws = tmp_path / "ws"
    assert main(["init", str(ws), "--satellite", str(demo_satellite_path())]) == 0
    capsys.readouterr()
    _refused(capsys, ["refit", str(ws), "--draws", "20"], "--draws", "at least")


def test_output_folder_under_a_file(capsys, tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    out = blocker / "run"
    _refused(capsys, [*FIT, "--out", str(out), "--quiet"], str(blocker), "is a file")


def test_output_folder_name_too_long(capsys, tmp_path):
    out = tmp_path / ("x" * 300)
    _refused(capsys, [*FIT, "--out", str(out), "--quiet"], "--out", "255 bytes")


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes in read-only folders")
def test_output_folder_read_only(capsys, tmp_path):
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o500)
    try:
        _refused(capsys, [*FIT, "--out", str(ro / "run"), "--quiet"], "cannot write in")
    finally:
        ro.chmod(0o700)
