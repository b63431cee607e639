"""Metallicities survive the workspace: a batch's feh/feh_err rows are stored in the catalogue
version as given, a later batch without them keeps them, and the stored version reads back to
the same per-star [Fe/H] as the files themselves (the inverse-variance mean of halo.inputs.feh).
"""

import numpy as np
from astropy.table import Table, vstack

from halo.inputs.catalogue import read_catalogue
from halo.inputs.satellite import read_satellite
from halo.pipeline.demo import demo_satellite_path
from halo.workspace.catalogues import add_catalogue, read_rows
from halo.workspace.create import init_workspace
from halo.workspace.record import open_workspace


def _batch(ids, mjd, feh=None):
    t = Table()
    t["id"] = ids
    t["ra"] = 151.25 + 1e-3 * np.arange(len(ids))
    t["dec"] = np.full(len(ids), -23.40)
    t["vlos"] = 80.0 + np.arange(len(ids), dtype=float)
    t["vlos_err"] = np.full(len(ids), 1.5)
    t["mjd"] = mjd
    if feh is not None:
        t["feh"], t["feh_err"] = feh, np.full(len(ids), 0.2)
    return t


def test_feh_rows_kept_across_batches(tmp_path):
    root = tmp_path / "W"
    init_workspace(root, demo_satellite_path(), models=["nfw"])
    first = _batch(["s1", "s2", "s3", "s4"], [1.0] * 4, [-2.1, -2.4, np.nan, -1.9])
    # a second epoch of s1 with its own [Fe/H], then a batch without the columns at all
    second = _batch(["s1", "s5", "s6"], [2.0, 1.0, 1.0], [-2.3, -2.0, np.nan])
    third = _batch(["s2", "s7", "s8"], [2.0, 1.0, 1.0])
    for name, t in (("a", first), ("b", second), ("c", third)):
        t.write(tmp_path / f"{name}.ecsv", format="ascii.ecsv")
        assert add_catalogue(root, tmp_path / f"{name}.ecsv")["changed"]
    path = open_workspace(root).catalogue_path(open_workspace(root).latest_catalogue()["sha256"])
    rows = read_rows(path)
    assert np.isfinite(rows["feh"]).sum() == 5  # s1 (2 epochs), s2, s4, s5
    sat = read_satellite(demo_satellite_path())
    stored = read_catalogue(path, sat)
    third["feh"], third["feh_err"] = np.full(3, np.nan), np.full(3, np.nan)
    everything = tmp_path / "all.ecsv"
    vstack([first, second, third]).write(everything, format="ascii.ecsv")
    direct = read_catalogue(everything, sat)
    order = np.argsort(stored.id)
    ref = np.argsort(direct.id)
    np.testing.assert_allclose(stored.feh[order], direct.feh[ref], equal_nan=True)
    np.testing.assert_allclose(stored.feh_err[order], direct.feh_err[ref], equal_nan=True)
    s1 = list(stored.id).index("s1")
    # inverse-variance mean of equal errors: the plain mean, error 0.2 / sqrt(2) (common practice)
    assert stored.feh[s1] == np.float64(-2.2) or abs(stored.feh[s1] + 2.2) < 1e-12
    assert abs(stored.feh_err[s1] - 0.2 / np.sqrt(2)) < 1e-12


def test_workspace_without_feh_keeps_its_hash(tmp_path):
    # no [Fe/H] anywhere: the stored version has no feh columns (the bytes, and so the hashes of
    # existing workspaces, are unchanged)
    root = tmp_path / "W"
    init_workspace(root, demo_satellite_path(), models=["nfw"])
    _batch(["s1", "s2", "s3"], [1.0] * 3).write(tmp_path / "a.ecsv", format="ascii.ecsv")
    add_catalogue(root, tmp_path / "a.ecsv")
    ws = open_workspace(root)
    text = ws.catalogue_path(ws.latest_catalogue()["sha256"]).read_text()
    assert "feh" not in text
