"""Catalogue versions of a workspace: whole tables in a canonical form, stored under the hash of
their content, each batch of stars and epochs merged into the latest version.

A version is a table (id, ra, dec, vlos, vlos_err, mjd[, member_prob][, feh, feh_err]) in a
canonical form (rows
sorted by id and epoch, fixed column order and units), so the same content always gets the same
hash and adding the same file twice changes nothing. A new measurement of a star at an epoch
already recorded with a different value is refused unless ``replace`` is asked; the old version
stays in objects/ and in the record.
"""

import io
import re
from pathlib import Path

import numpy as np

from halo.core.errors import InputError
from halo.inputs.epochs import MIN_STARS
from halo.workspace.record import now, open_workspace, sha256

__all__ = [
    "COLUMNS",
    "add_catalogue",
    "canonical_bytes",
    "canonical_ids",
    "read_rows",
    "rows_from_stars",
]

COLUMNS = ("id", "ra", "dec", "vlos", "vlos_err", "mjd", "member_prob", "feh", "feh_err")
#: columns compared when a row of a new batch matches one of the workspace
_COMPARED = ("ra", "dec", "vlos", "vlos_err", "member_prob", "feh", "feh_err")
#: float columns, written with every digit
_FLOATS = ("ra", "dec", "vlos", "vlos_err", "mjd", "member_prob", "feh", "feh_err")
_INTEGRAL_FLOAT = re.compile(r"^([+-]?\d+)\.0*$")


def canonical_ids(ids):
    """Star ids in canonical form: an integral number written as a float (``1.0``, as a float
    id column gives it) is written as the integer (``1``), so that a batch whose id column was
    read as floats matches the same stars given with integer ids."""
    ids = np.asarray(ids).astype(str)
    return np.array([_INTEGRAL_FLOAT.sub(r"\1", s) for s in ids], dtype=str)


def rows_from_stars(stars):
    """Per-epoch rows of a StarData as a dict of arrays in canonical units."""
    es = np.asarray(stars.epoch_star)
    rows = {
        "id": canonical_ids(stars.id)[es],
        "ra": np.asarray(stars.ra, dtype=float)[es],
        "dec": np.asarray(stars.dec, dtype=float)[es],
        "vlos": np.asarray(stars.epoch_v, dtype=float),
        "vlos_err": np.asarray(stars.epoch_err, dtype=float),
        "mjd": np.asarray(stars.epoch_mjd, dtype=float),
    }
    if stars.member_prob is not None:
        rows["member_prob"] = np.asarray(stars.member_prob, dtype=float)[es]
    if getattr(stars, "epoch_feh", None) is not None:  # the rows' [Fe/H] as given (NaN: none)
        rows["feh"] = np.asarray(stars.epoch_feh, dtype=float)
        rows["feh_err"] = np.asarray(stars.epoch_feh_err, dtype=float)
    return rows


def canonical_bytes(rows):
    """A deterministic ECSV text of the rows (sorted by id, then epoch).

    Written to memory, not through :func:`halo.core.fileio.write_ecsv`: these bytes are hashed,
    and the object stored under the hash is exactly them.
    """
    from astropy import units as u
    from astropy.table import Table

    mjd_key = np.where(np.isnan(rows["mjd"]), -np.inf, rows["mjd"])
    order = np.lexsort((mjd_key, rows["id"]))
    t = Table()
    units = {"ra": u.deg, "dec": u.deg, "vlos": u.km / u.s, "vlos_err": u.km / u.s}
    for c in COLUMNS:
        if c not in rows:
            continue
        if c in ("mjd", "feh", "feh_err") and np.all(np.isnan(rows[c])):
            continue
        col = rows[c][order]
        t[c] = col if c not in units else col * units[c]
    for c in _FLOATS:
        if c in t.colnames:
            t[c].info.format = ".17g"
    t.meta.clear()
    buf = io.StringIO()
    t.write(buf, format="ascii.ecsv")
    return buf.getvalue().encode()


def read_rows(path):
    """The rows of a stored catalogue version (as :func:`rows_from_stars` gives them)."""
    from astropy.table import Table

    t = Table.read(path, format="ascii.ecsv")
    rows = {c: np.asarray(t[c]) for c in t.colnames}
    rows["id"] = canonical_ids(rows["id"])
    for c in ("ra", "dec", "vlos", "vlos_err", "member_prob", "feh", "feh_err"):
        if c in rows:
            rows[c] = np.ma.filled(np.ma.asarray(rows[c], dtype=float), np.nan)
    rows["mjd"] = rows["mjd"].astype(float) if "mjd" in rows else np.full(len(t), np.nan)
    return rows


def _same(a, b):
    # NaN = not measured ([Fe/H] of a row without one): equal to NaN
    return np.isclose(a, b, rtol=1e-12, atol=1e-12, equal_nan=True)


def _epoch_key(rows, k):
    """(id, mjd or None) of row k: how rows of two batches are matched."""
    return rows["id"][k], None if np.isnan(rows["mjd"][k]) else float(rows["mjd"][k])


def _has_mjd(rows):
    return bool(np.any(np.isfinite(rows["mjd"])))


def _same_columns(old, new, source):
    """InputError unless the batch carries member_prob and mjd exactly when the workspace does
    (a version mixing rows with and without epochs could never be fitted)."""
    for col, has in (("member_prob", lambda r: "member_prob" in r), ("mjd", _has_mjd)):
        if has(old) != has(new):
            raise InputError(
                f"{source}: {col} is given in "
                f"{'this file' if has(new) else 'the workspace'} only; every batch must carry "
                "it or none"
            )


def _merge(old, new, row_no, source, latest_seq, replace):
    """(merged rows, rows added, rows replaced) of a batch ``new`` merged into ``old``.

    InputError naming the file (``source``), row and column of the first conflict unless
    ``replace``; ``row_no`` are the batch rows' 1-based file rows.
    """
    _same_columns(old, new, source)
    for c in ("feh", "feh_err"):  # a batch without [Fe/H] keeps the workspace's, and back
        for a, b in ((old, new), (new, old)):
            if c in a and c not in b:
                b[c] = np.full(len(b["id"]), np.nan)
    index = {_epoch_key(old, k): k for k in range(len(old["id"]))}
    keep_new = np.zeros(len(new["id"]), dtype=bool)
    replace_old = []
    fields = [c for c in _COMPARED if c in new]
    for k in range(len(new["id"])):
        key = _epoch_key(new, k)
        j = index.get(key)
        if j is None:
            keep_new[k] = True
            continue
        diff = [c for c in fields if not _same(new[c][k], old[c][j])]
        if not diff:
            continue
        if not replace:
            epoch = "" if key[1] is None else f" at mjd {key[1]:g}"
            raise InputError(
                f"{source}: row {row_no[k]}, column '{diff[0]}': star '{key[0]}'"
                f"{epoch} is already in catalogue version {latest_seq} with "
                f"{diff[0]} = {old[diff[0]][j]:g}, here {new[diff[0]][k]:g}; use "
                "--replace to supersede it (the old version stays retrievable)"
            )
        replace_old.append(j)
        keep_new[k] = True
    drop = np.zeros(len(old["id"]), dtype=bool)
    drop[replace_old] = True
    merged = {c: np.concatenate([old[c][~drop], new[c][keep_new]]) for c in old if c in new}
    return merged, int(keep_new.sum()) - len(replace_old), len(replace_old)


def _record_version(ws, sha, latest, counts, catalogue):
    """Insert a catalogue version; returns its number."""
    with ws.db() as con:
        cur = con.execute(
            "INSERT INTO catalogue_versions (sha256, parent, created, n_rows, n_stars, "
            "added_rows, replaced_rows, source, source_sha256) VALUES (?,?,?,?,?,?,?,?,?)",
            (
                sha,
                None if latest is None else latest["seq"],
                now(),
                counts["n_rows"],
                counts["n_stars"],
                counts["added"],
                counts["replaced"],
                str(catalogue.resolve()),
                sha256(catalogue.read_bytes()),
            ),
        )
        return cur.lastrowid


def _batch_rows(ws, catalogue, columns):
    """(rows, their 1-based file rows) of a catalogue file read against the satellite."""
    from halo.inputs.catalogue import read_catalogue
    from halo.inputs.satellite import read_satellite

    sat = read_satellite(ws.satellite_path())
    # a batch may hold a single star: the workspace's whole catalogue needs MIN_STARS
    stars = read_catalogue(catalogue, sat, columns, min_stars=1)
    if "id" not in stars.columns:
        raise InputError(
            f"{catalogue}: a workspace needs an id column to match stars between catalogues"
        )
    return rows_from_stars(stars), np.asarray(stars.epoch_row)


def _merged(ws, latest, new, row_no, catalogue, replace):
    """(merged rows, rows added, rows replaced) of the batch merged into the latest version.

    A latest version whose object was edited or damaged is refused (InputError), unless the
    batch is exactly that version: then it is written again (restored) and nothing changes.
    """
    if latest is None:
        return new, len(new["id"]), 0
    try:
        path = ws.catalogue_path(latest["sha256"])
    except InputError:
        if sha256(canonical_bytes(new)) != latest["sha256"]:
            raise
        ws.store(canonical_bytes(new), ".ecsv")
        return new, 0, 0
    old = read_rows(path)
    return _merge(old, new, row_no, catalogue, latest["seq"], replace)


def add_catalogue(root, catalogue, columns=None, replace=False):
    """Merge a catalogue's stars and epochs into the workspace; returns a dict describing it.

    Rows are matched by (id, mjd). A matching row with the same values changes nothing; one with
    different values is a conflict (InputError naming the file, row and id) unless ``replace``.
    Returns {"changed": bool, "seq", "sha256", "added", "replaced", "n_rows", "n_stars"}.
    """
    ws = open_workspace(root)
    catalogue = Path(catalogue)
    with ws.lock("add"):
        new, row_no = _batch_rows(ws, catalogue, columns)
        latest = ws.latest_catalogue()
        merged, added, replaced = _merged(ws, latest, new, row_no, catalogue, replace)
        data = canonical_bytes(merged)
        sha = sha256(data)
        n_rows = len(merged["id"])
        n_stars = len(np.unique(merged["id"]))
        if n_stars < MIN_STARS:
            raise InputError(
                f"{catalogue}: the workspace's catalogue would hold {n_stars} star(s); at least "
                f"{MIN_STARS} are needed (add a file with more stars)"
            )
        if latest is not None and sha == latest["sha256"]:
            return {"changed": False, "seq": latest["seq"], "sha256": sha, "added": 0,
                    "replaced": 0, "n_rows": n_rows, "n_stars": n_stars}  # fmt: skip
        ws.store(data, ".ecsv")
        counts = {"n_rows": n_rows, "n_stars": n_stars, "added": added, "replaced": replaced}
        seq = _record_version(ws, sha, latest, counts, catalogue)
    return {"changed": True, "seq": seq, "sha256": sha, "added": added, "replaced": replaced,
            "n_rows": n_rows, "n_stars": n_stars}  # fmt: skip
