"""The record of a workspace: its SQLite database (catalogue, satellite and spec versions, runs),
the content-addressed object folder, and the lock held by the command that writes.

Layout of a workspace folder DIR::

    DIR/workspace.sqlite        the record: catalogue versions, satellite and spec versions, runs
    DIR/objects/<sha256>.ecsv   catalogue versions (immutable, named by the hash of their content)
    DIR/objects/<sha256>.toml   satellite file and model spec versions (immutable)
    DIR/specs/<sha256>/<name>.toml   the same specs under their model names (immutable)
    DIR/runs/<NNNN>/            one fit output folder per run (summary.json, posteriors, figures)
    DIR/.lock                   held (fcntl) by the command that writes
"""

import contextlib
import datetime
import fcntl
import hashlib
import json
import os
import sqlite3
from pathlib import Path

from halo.core.errors import InputError
from halo.core.fileio import atomic_path

__all__ = ["DB_NAME", "SCHEMA", "RUN_KEYS", "Workspace", "open_workspace", "now", "sha256"]

DB_NAME = "workspace.sqlite"
SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS catalogue_versions (
    seq INTEGER PRIMARY KEY, sha256 TEXT NOT NULL, parent INTEGER, created TEXT NOT NULL,
    n_rows INTEGER NOT NULL, n_stars INTEGER NOT NULL, added_rows INTEGER NOT NULL,
    replaced_rows INTEGER NOT NULL, source TEXT NOT NULL, source_sha256 TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS satellite_versions (
    seq INTEGER PRIMARY KEY, sha256 TEXT NOT NULL, created TEXT NOT NULL, source TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS runs (
    seq INTEGER PRIMARY KEY, folder TEXT NOT NULL, started TEXT NOT NULL, finished TEXT NOT NULL,
    catalogue_seq INTEGER NOT NULL, catalogue_sha256 TEXT NOT NULL, satellite_sha256 TEXT NOT NULL,
    specs TEXT NOT NULL, settings TEXT NOT NULL, inputs_key TEXT NOT NULL,
    wall_s REAL NOT NULL, reused TEXT NOT NULL, headline TEXT NOT NULL, version TEXT NOT NULL);
"""

#: columns of the runs table, in the order :meth:`Workspace.runs_list` reads them
RUN_KEYS = (
    "seq", "folder", "started", "finished", "catalogue_seq", "catalogue_sha256",
    "satellite_sha256", "specs", "settings", "inputs_key", "wall_s", "reused",
    "headline", "version",
)  # fmt: skip
#: runs columns holding JSON
_JSON_KEYS = ("specs", "settings", "reused", "headline")


def now():
    """The current UTC time, ISO 8601 to the second."""
    return datetime.datetime.now(datetime.UTC).isoformat(timespec="seconds")


def sha256(data):
    """Hex SHA-256 of bytes."""
    return hashlib.sha256(data).hexdigest()


class Workspace:
    """An open workspace folder (use :func:`open_workspace`)."""

    def __init__(self, root):
        self.root = Path(root)
        self.db_path = self.root / DB_NAME
        self.objects = self.root / "objects"
        self.runs = self.root / "runs"

    # ------------------------------------------------------------------ database
    @contextlib.contextmanager
    def db(self):
        """A connection in one transaction (committed on success, rolled back on error);
        InputError saying how to recover when the record is not a whole halo database."""
        try:
            con = sqlite3.connect(self.db_path, timeout=30)
        except sqlite3.Error as exc:
            raise self.damaged(exc) from None
        try:
            with con:
                yield con
        except sqlite3.DatabaseError as exc:
            if not _is_damage(exc):
                raise
            raise self.damaged(exc) from None
        finally:
            con.close()

    def damaged(self, exc):
        """The InputError of a record that is overwritten, truncated or otherwise damaged."""
        return InputError(
            f"{self.db_path}: the workspace record is damaged ({exc}); the catalogue versions "
            f"({self.objects}/*.ecsv) and runs ({self.runs}/) are untouched: restore "
            f"{DB_NAME} from a backup, or create a new workspace with `halo init` and `halo add` "
            "the catalogue files to it"
        )

    def meta(self, key, default=None):
        with self.db() as con:
            row = con.execute("SELECT value FROM meta WHERE key = ?", (key,)).fetchone()
        return default if row is None else json.loads(row[0])

    def latest_catalogue(self):
        with self.db() as con:
            row = con.execute(
                "SELECT seq, sha256, n_rows, n_stars FROM catalogue_versions "
                "ORDER BY seq DESC LIMIT 1"
            ).fetchone()
        return (
            None
            if row is None
            else dict(zip(("seq", "sha256", "n_rows", "n_stars"), row, strict=True))
        )

    def latest_satellite(self):
        with self.db() as con:
            row = con.execute(
                "SELECT seq, sha256, source FROM satellite_versions ORDER BY seq DESC LIMIT 1"
            ).fetchone()
        if row is None:
            raise self.damaged("no satellite version")
        return dict(zip(("seq", "sha256", "source"), row, strict=True))

    def runs_list(self):
        with self.db() as con:
            rows = con.execute(f"SELECT {', '.join(RUN_KEYS)} FROM runs ORDER BY seq").fetchall()
        out = []
        for r in rows:
            d = dict(zip(RUN_KEYS, r, strict=True))
            for k in _JSON_KEYS:
                d[k] = json.loads(d[k])
            out.append(d)
        return out

    def record_run(self, run):
        """Insert a run (a dict with every key of :data:`RUN_KEYS`) in one transaction."""
        values = [json.dumps(run[k]) if k in _JSON_KEYS else run[k] for k in RUN_KEYS]
        with self.db() as con:
            con.execute(
                f"INSERT INTO runs ({', '.join(RUN_KEYS)}) "
                f"VALUES ({','.join('?' * len(RUN_KEYS))})",
                values,
            )

    # ------------------------------------------------------------------ objects
    def object_path(self, sha, suffix):
        return self.objects / f"{sha}{suffix}"

    def store(self, data, suffix):
        """Store bytes under their hash (no-op when present and whole: a damaged or edited
        object is written again); returns the hash."""
        sha = sha256(data)
        path = self.object_path(sha, suffix)
        if not _holds(path, sha):
            with atomic_path(path) as tmp:
                tmp.write_bytes(data)
        return sha

    def verified(self, sha, suffix):
        """The path of object ``sha``, after checking that its content still has that hash
        (objects are never re-hashed otherwise); InputError naming it when not."""
        path = self.object_path(sha, suffix)
        if not path.is_file():
            raise InputError(
                f"{path}: missing from the workspace (the record refers to it); restore it "
                "from a backup or add the original file again"
            )
        if not _holds(path, sha):
            raise InputError(
                f"{path}: its content no longer matches its hash (edited or damaged after it "
                "was stored; objects must never be edited in place): restore it from a backup, "
                "or `halo add` the one file that version was made from again"
            )
        return path

    def satellite_path(self):
        return self.verified(self.latest_satellite()["sha256"], ".toml")

    def catalogue_path(self, sha):
        return self.verified(sha, ".ecsv")

    # ------------------------------------------------------------------ lock
    @contextlib.contextmanager
    def lock(self, what):
        """Hold the workspace's write lock while the block runs (``what`` names the holder);
        InputError at once when another command holds it."""
        path = self.root / ".lock"
        try:
            fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as exc:
            raise InputError(
                f"{path}: cannot open the workspace's lock file ({exc.strerror}); it must be a "
                "plain file the user can write (remove it if it is a folder)"
            ) from None
        try:
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                holder = os.pread(fd, 200, 0).decode(errors="replace").strip() or "another"
                raise InputError(
                    f"{self.root}: the workspace is busy ({holder}); wait for it to finish"
                ) from None
            os.ftruncate(fd, 0)
            os.pwrite(fd, f"halo {what}, pid {os.getpid()}".encode(), 0)
            yield
        finally:
            with contextlib.suppress(OSError):
                os.ftruncate(fd, 0)
            os.close(fd)  # closing releases the lock


def open_workspace(root):
    """The workspace at ``root`` (InputError when it is not one)."""
    ws = Workspace(root)
    if not ws.db_path.is_file():
        raise InputError(f"{root}: not a halo workspace (create one with `halo init`)")
    with ws.db() as con:  # a damaged record is named now, not halfway through a command
        for table in ("meta", "catalogue_versions", "satellite_versions", "runs"):
            con.execute(f"SELECT count(*) FROM {table}").fetchone()
    return ws


def _is_damage(exc):
    """True for the errors of a database that is not (or no longer) a whole halo record."""
    if type(exc) is sqlite3.DatabaseError:  # "file is not a database", "malformed" ...
        return True
    msg = str(exc)
    return isinstance(exc, sqlite3.OperationalError) and (
        msg.startswith(("no such table", "no such column", "disk I/O error")) or "malformed" in msg
    )


def _holds(path, sha):
    """True when the file ``path`` exists and its content has the hash ``sha``."""
    try:
        return sha256(Path(path).read_bytes()) == sha
    except OSError:
        return False
