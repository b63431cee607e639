"""Workspaces without fitting, kept correct: batches matched whatever the type of their id
column, every batch with or without epochs alike, small batches, objects verified on read, and
one-line errors (exit 2) for a workspace folder, lock or record that is not what it should be."""

import sqlite3
from pathlib import Path

import numpy as np
import pytest
from astropy.table import Table

from halo.cli.app import main
from halo.core.errors import InputError
from halo.pipeline.demo import demo_satellite_path
from halo.pipeline.fit import FitSettings
from halo.workspace.catalogues import add_catalogue
from halo.workspace.create import init_workspace
from halo.workspace.planning import plan
from halo.workspace.record import open_workspace


def _table(ids, vlos, mjd=None):
    t = Table()
    t["id"] = ids
    t["ra"] = np.full(len(ids), 150.0) + 1e-3 * np.arange(len(ids))
    t["dec"] = np.full(len(ids), 20.0)
    t["vlos"] = np.asarray(vlos, dtype=float)
    t["vlos_err"] = np.full(len(ids), 1.5)
    if mjd is not None:
        t["mjd"] = mjd
    return t


def _write(t, path):
    t.write(path, format="ascii.ecsv", overwrite=True)
    return path


@pytest.fixture
def ws(tmp_path):
    root = tmp_path / "W"
    init_workspace(root, demo_satellite_path(), models=["nfw"])
    return root


def run(capsys, *args):
    code = main([str(a) for a in args])
    out, err = capsys.readouterr()
    return code, out, err


def test_float_ids_match_integer_ids(ws, tmp_path):
    ints = _table(np.array([1, 2, 3, 4]), [80.0, 85.0, 90.0, 95.0])
    add_catalogue(ws, _write(ints, tmp_path / "ints.ecsv"))
    floats = _table(np.array([1.0, 2.0, 3.0, 4.0]), [80.0, 85.0, 90.0, 95.0])
    r = add_catalogue(ws, _write(floats, tmp_path / "floats.ecsv"))
    assert not r["changed"] and r["n_stars"] == 4  # the same stars, not four more


def test_batch_without_mjd_into_a_workspace_with_mjd_is_refused(ws, tmp_path):
    first = _table(["a", "b", "c"], [80.0, 85.0, 90.0], mjd=[1.0, 1.0, 1.0])
    r1 = add_catalogue(ws, _write(first, tmp_path / "first.ecsv"))
    bare = _write(_table(["d", "e", "f"], [81.0, 82.0, 83.0]), tmp_path / "bare.ecsv")
    with pytest.raises(InputError, match=r"bare.ecsv: mjd is given in the workspace only"):
        add_catalogue(ws, bare)
    # nothing changed, and the latest version is still one a refit can read
    assert plan(open_workspace(ws), FitSettings())["catalogue"]["seq"] == r1["seq"]


def test_batch_with_mjd_into_a_workspace_without_is_refused(ws, tmp_path):
    add_catalogue(ws, _write(_table(["a", "b", "c"], [80.0, 85.0, 90.0]), tmp_path / "a.ecsv"))
    dated = _write(_table(["d"], [81.0], mjd=[5.0]), tmp_path / "dated.ecsv")
    with pytest.raises(InputError, match=r"dated.ecsv: mjd is given in this file only"):
        add_catalogue(ws, dated)


def test_small_batches_are_taken_the_whole_catalogue_needs_three(ws, tmp_path, capsys):
    two = _write(_table(["a", "b"], [80.0, 85.0]), tmp_path / "two.ecsv")
    code, _, err = run(capsys, "add", ws, two)
    assert code == 2 and "the workspace's catalogue would hold 2 star(s)" in err
    first = _write(_table(["a", "b", "c"], [80.0, 85.0, 90.0]), tmp_path / "first.ecsv")
    assert run(capsys, "add", ws, first)[0] == 0
    one = _write(_table(["d"], [81.0]), tmp_path / "one.ecsv")
    code, out, err = run(capsys, "add", ws, one)
    assert code == 0, err
    assert "1 rows added" in out and "4 stars" in out
    pair = _table(["e", "f"], [82.0, 83.0])
    code, out, err = run(capsys, "add", ws, _write(pair, tmp_path / "pair.ecsv"))
    assert code == 0 and "6 stars" in out, err


def test_an_object_edited_in_place_is_not_trusted(ws, tmp_path, capsys):
    first = _write(_table(["a", "b", "c"], [80.0, 85.0, 90.0]), tmp_path / "first.ecsv")
    r = add_catalogue(ws, first)
    w = open_workspace(ws)
    obj = w.object_path(r["sha256"], ".ecsv")
    original = obj.read_bytes()
    obj.write_bytes(original.replace(b"80", b"20"))
    with pytest.raises(InputError, match=r"no longer matches its hash"):
        plan(w, FitSettings())
    code, _, err = run(capsys, "status", ws)
    assert code == 2 and "no longer matches its hash" in err and len(err.splitlines()) == 1
    code, _, err = run(capsys, "refit", ws, "--quiet")
    assert code == 2 and "no longer matches its hash" in err
    # adding the original file again restores the object
    assert not add_catalogue(ws, first)["changed"]
    assert obj.read_bytes() == original
    assert plan(w, FitSettings())["catalogue"]["sha256"] == r["sha256"]


def test_workspace_folder_is_a_file_or_cannot_be_made(tmp_path, capsys):
    f = tmp_path / "plain"
    f.write_text("x")
    code, _, err = run(capsys, "init", f, "--satellite", "demo")
    assert code == 2 and "exists and is not a folder" in err and len(err.splitlines()) == 1
    # a parent folder the user may not write to (/proc refuses every new folder, even root's)
    code, _, err = run(capsys, "init", "/proc/halo-workspace", "--satellite", "demo")
    assert code == 2 and "cannot create the workspace folder" in err
    assert len(err.splitlines()) == 1


def test_lock_that_is_a_folder(ws, tmp_path, capsys):
    (ws / ".lock").unlink(missing_ok=True)
    (ws / ".lock").mkdir()
    t = _write(_table(["a", "b", "c"], [80.0, 85.0, 90.0]), tmp_path / "t.ecsv")
    code, _, err = run(capsys, "add", ws, t)
    assert code == 2 and ".lock: cannot open the workspace's lock file" in err
    assert len(err.splitlines()) == 1


@pytest.mark.parametrize("damage", ["overwritten", "truncated", "emptied"])
def test_damaged_record_says_how_to_recover(ws, tmp_path, capsys, damage):
    t = _write(_table(["a", "b", "c"], [80.0, 85.0, 90.0]), tmp_path / "t.ecsv")
    assert run(capsys, "add", ws, t)[0] == 0
    db = ws / "workspace.sqlite"
    data = db.read_bytes()
    if damage == "overwritten":
        db.write_text("these are my notes\n" * 50)
    elif damage == "truncated":
        db.write_bytes(data[: len(data) // 3])
    else:
        db.write_bytes(b"")
    for args in (("status", ws), ("add", ws, t), ("refit", ws, "--quiet"), ("history", ws)):
        code, _, err = run(capsys, *args)
        assert code == 2, (args, err)
        assert "the workspace record is damaged" in err and "halo init" in err, err
        assert len(err.splitlines()) == 1
    # the catalogue version is still there to start again from
    assert list((ws / "objects").glob("*.ecsv"))


def test_record_missing_a_table(ws, capsys):
    con = sqlite3.connect(ws / "workspace.sqlite")
    con.execute("DROP TABLE runs")
    con.commit()
    con.close()
    code, _, err = run(capsys, "status", ws)
    assert code == 2 and "the workspace record is damaged" in err


def test_refit_satellite_option_records_another_file(ws, tmp_path, capsys):
    from halo.workspace.create import current_satellite

    other = tmp_path / "other.toml"
    other.write_text(Path(demo_satellite_path()).read_text() + "\n# moved\n")
    # no catalogue yet: the refit stops there, after recording the satellite file
    code, _, err = run(capsys, "refit", ws, "--satellite", other, "--quiet")
    assert code == 2 and "no catalogue yet" in err
    w = open_workspace(ws)
    assert w.latest_satellite()["seq"] == 2
    assert w.latest_satellite()["source"] == str(other.resolve())
    other.write_text(other.read_text() + "# edited again\n")
    cur = current_satellite(w)  # the recorded path is the one re-read from now on
    assert cur["changed"] and str(other.resolve()) in cur["note"]
