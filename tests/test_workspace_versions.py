"""Workspaces without fitting: canonical catalogue versions, adding batches, conflicts, the lock,
the status and plan before the first run."""

import hashlib

import numpy as np
import pytest
from astropy.table import Table

from halo.core.errors import InputError
from halo.pipeline.demo import demo_satellite_path
from halo.pipeline.fit import FitSettings
from halo.workspace.catalogues import add_catalogue, canonical_bytes, read_rows
from halo.workspace.create import init_workspace
from halo.workspace.planning import plan
from halo.workspace.views import status


def _table(ids, mjd, vlos):
    t = Table()
    t["id"] = ids
    t["ra"] = np.full(len(ids), 150.0) + 1e-3 * np.arange(len(ids))
    t["dec"] = np.full(len(ids), 20.0)
    t["vlos"] = vlos
    t["vlos_err"] = np.full(len(ids), 1.5)
    t["mjd"] = mjd
    return t


def _rows(t):
    return {c: np.asarray(t[c]) for c in t.colnames}


def test_canonical_bytes_do_not_depend_on_row_order(tmp_path):
    t = _table(["b", "a", "a", "c"], [1.0, 2.0, 1.0, 1.0], [10.0, 11.0, 12.0, 13.0])
    rows = {**_rows(t), "id": np.asarray(t["id"]).astype(str)}
    shuffled = {c: v[[3, 1, 0, 2]] for c, v in rows.items()}
    assert canonical_bytes(rows) == canonical_bytes(shuffled)
    path = tmp_path / "v.ecsv"
    path.write_bytes(canonical_bytes(rows))
    back = read_rows(path)
    assert list(back["id"]) == ["a", "a", "b", "c"] and list(back["mjd"]) == [1.0, 2.0, 1.0, 1.0]
    np.testing.assert_array_equal(back["vlos"], [12.0, 11.0, 10.0, 13.0])


@pytest.fixture
def ws_and_batches(tmp_path):
    root = tmp_path / "W"
    ws = init_workspace(root, demo_satellite_path(), models=["nfw"])
    first = _table(["s1", "s2", "s3", "s4"], [1.0, 1.0, 1.0, 1.0], [80.0, 85.0, 90.0, 95.0])
    # a second epoch of s1 and two new stars; a batch that changes s2 and repeats s3, s4
    # (each batch needs at least three stars)
    second = _table(["s1", "s5", "s6"], [2.0, 1.0, 1.0], [81.0, 70.0, 75.0])
    clash = _table(["s2", "s3", "s4"], [1.0, 1.0, 1.0], [86.0, 90.0, 95.0])
    clash["ra"] = first["ra"][1:]
    paths = {}
    for name, t in (("first", first), ("second", second), ("clash", clash)):
        paths[name] = tmp_path / f"{name}.ecsv"
        t.write(paths[name], format="ascii.ecsv")
    return root, ws, paths


def test_batches_versions_and_conflicts(ws_and_batches):
    root, ws, paths = ws_and_batches
    assert ws.meta("specs").keys() == {"nfw", "stars-only"}  # stars-only always there
    a = add_catalogue(root, paths["first"])
    assert a["changed"] and a["seq"] == 1 and (a["n_rows"], a["n_stars"]) == (4, 4)
    assert not add_catalogue(root, paths["first"])["changed"]  # same content, same hash
    b = add_catalogue(root, paths["second"])
    assert (b["seq"], b["added"], b["n_rows"], b["n_stars"]) == (2, 3, 7, 6)
    with pytest.raises(InputError, match=r"clash.ecsv: row 1, column 'vlos': star 's2' at mjd 1"):
        add_catalogue(root, paths["clash"])
    c = add_catalogue(root, paths["clash"], replace=True)
    assert (c["seq"], c["replaced"], c["added"], c["n_rows"]) == (3, 1, 0, 7)
    for seq_sha in (a["sha256"], b["sha256"], c["sha256"]):  # every version kept, by hash
        data = ws.catalogue_path(seq_sha).read_bytes()
        assert hashlib.sha256(data).hexdigest() == seq_sha


def test_status_and_plan_before_the_first_run(ws_and_batches):
    root, ws, paths = ws_and_batches
    st = status(root, FitSettings())
    assert st["stale"] == ["no catalogue yet: add one with `halo add`"] and st["next"] == {}
    with pytest.raises(InputError, match="no catalogue yet"):
        plan(ws, FitSettings())
    add_catalogue(root, paths["first"])
    st = status(root, FitSettings())
    assert st["stale"] == ["never fitted"] and st["last_run"] is None
    assert st["next"] == {"nfw": "fit", "stars-only": "fit"}
    p1, p2 = plan(ws, FitSettings()), plan(ws, FitSettings())
    assert p1["inputs_key"] == p2["inputs_key"] and not p1["up_to_date"]
    assert plan(ws, FitSettings(seed=p1["settings"]["seed"] + 1))["inputs_key"] != p1["inputs_key"]


def test_lock_refuses_a_second_writer(ws_and_batches):
    root, ws, paths = ws_and_batches
    with ws.lock("test"):
        with pytest.raises(InputError, match="busy \\(halo test, pid"):
            add_catalogue(root, paths["first"])
    assert add_catalogue(root, paths["first"])["changed"]  # released


def test_init_refuses_a_used_folder(tmp_path):
    init_workspace(tmp_path / "W", demo_satellite_path())
    with pytest.raises(InputError, match="already a halo workspace"):
        init_workspace(tmp_path / "W", demo_satellite_path())
    (tmp_path / "other").mkdir()
    (tmp_path / "other" / "x").write_text("")
    with pytest.raises(InputError, match="not empty"):
        init_workspace(tmp_path / "other", demo_satellite_path())
