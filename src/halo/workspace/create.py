"""A new workspace for a satellite file, and new versions of its satellite file and model specs.

The satellite file and every model spec are stored as immutable objects under their hash; the
record keeps the satellite versions in order and the current spec of each model by name. The
satellite file's path is recorded too: `halo status` and `halo refit` re-read it, and a file
edited since its latest version is a new version (recorded by the refit).
"""

import contextlib
import json
import os
import sqlite3
from importlib import resources
from pathlib import Path

from halo.core.errors import InputError
from halo.core.vocabulary import DEFAULT_MODELS, STARS_ONLY
from halo.workspace.record import DB_NAME, SCHEMA, Workspace, now, open_workspace, sha256

__all__ = [
    "init_workspace",
    "set_satellite",
    "record_satellite",
    "current_satellite",
    "sync_satellite",
    "set_models",
    "spec_bytes",
]


def spec_bytes(name):
    """(name, TOML bytes) of a model spec given by shipped name or path."""
    from halo.inputs.spec import available_specs, load_spec

    spec = load_spec(name)  # validates (InputError on bad specs)
    path = Path(str(name))
    if path.suffix == ".toml" or path.exists():
        return spec.name, path.read_bytes()
    if spec.name in available_specs():  # a shipped name, given in any case
        return spec.name, resources.files("halo.models").joinpath(f"{spec.name}.toml").read_bytes()
    raise InputError(f"unknown model '{name}'")


def _specs(models):
    """{model name: TOML bytes} of the models asked (the defaults if none) and stars-only."""
    specs = {}
    for m in models or DEFAULT_MODELS:
        name, text = spec_bytes(m)
        specs[name] = text
    if STARS_ONLY not in specs:  # always fitted: every model is compared with it
        specs[STARS_ONLY] = spec_bytes(STARS_ONLY)[1]
    return specs


def _new_database(ws, sat_sha, satellite_file, spec_shas):
    """Write the record to a temporary file and rename it into place (the workspace exists
    only once its database is whole)."""
    tmp_db = ws.root / f".{DB_NAME}.part"
    with contextlib.suppress(FileNotFoundError):
        tmp_db.unlink()
    con = sqlite3.connect(tmp_db)
    with con:
        con.executescript(SCHEMA)
        con.execute(
            "INSERT INTO satellite_versions (sha256, created, source) VALUES (?, ?, ?)",
            (sat_sha, now(), str(Path(satellite_file).resolve())),
        )
        con.execute("INSERT INTO meta VALUES ('specs', ?)", (json.dumps(spec_shas),))
        con.execute("INSERT INTO meta VALUES ('created', ?)", (json.dumps(now()),))
    con.close()
    os.replace(tmp_db, ws.db_path)


def init_workspace(root, satellite_file, models=None):
    """Create a workspace at ``root`` for the satellite file; returns the Workspace."""
    from halo.inputs.satellite import read_satellite

    root = Path(root)
    if root.exists() and not root.is_dir():
        raise InputError(f"{root}: exists and is not a folder; choose a new folder")
    if (root / DB_NAME).exists():
        raise InputError(f"{root}: already a halo workspace")
    if root.exists() and any(root.iterdir()):
        raise InputError(f"{root}: folder exists and is not empty; choose a new folder")
    read_satellite(satellite_file)  # validates
    data = Path(satellite_file).read_bytes()
    specs = _specs(models)
    ws = Workspace(root)
    try:
        root.mkdir(parents=True, exist_ok=True)
        ws.objects.mkdir(exist_ok=True)
        ws.runs.mkdir(exist_ok=True)
    except OSError as exc:
        raise InputError(f"{root}: cannot create the workspace folder ({exc.strerror})") from None
    with ws.lock("init"):
        sat_sha = ws.store(data, ".toml")
        spec_shas = {n: ws.store(t, ".toml") for n, t in specs.items()}
        _new_database(ws, sat_sha, satellite_file, spec_shas)
    return ws


def record_satellite(ws, satellite_file):
    """Store and record a satellite file's content as a new version (the lock held); False
    when it is the latest version already (only its path is then recorded anew)."""
    from halo.inputs.satellite import read_satellite

    read_satellite(satellite_file)  # validates: InputError naming the file and key
    data = Path(satellite_file).read_bytes()
    sha = ws.store(data, ".toml")
    source = str(Path(satellite_file).resolve())
    latest = ws.latest_satellite()
    with ws.db() as con:
        if sha == latest["sha256"]:
            con.execute(
                "UPDATE satellite_versions SET source = ? WHERE seq = ?", (source, latest["seq"])
            )
            return False
        con.execute(
            "INSERT INTO satellite_versions (sha256, created, source) VALUES (?, ?, ?)",
            (sha, now(), source),
        )
    return True


def set_satellite(root, satellite_file):
    """Make ``satellite_file`` the workspace's satellite file: its content is recorded as a new
    version when it differs from the latest (the next refit uses it), and its path is the one
    later refits re-read. Returns True when a new version was recorded."""
    ws = open_workspace(root)
    with ws.lock("satellite"):
        return record_satellite(ws, satellite_file)


def current_satellite(ws):
    """The satellite version the next refit uses: {seq, sha256, source, changed, note}.

    The latest recorded version, unless the file it was read from (its recorded ``source``
    path) now holds other content: then that content (``changed`` True, not yet recorded;
    :func:`sync_satellite` records it). A file that can no longer be read leaves the stored
    version in use (``note`` says so).
    """
    latest = ws.latest_satellite()
    src = Path(latest["source"])
    out = {**latest, "changed": False, "note": None}
    try:
        data = src.read_bytes()
    except OSError:
        out["note"] = (
            f"the satellite file {src} cannot be read: its stored version {latest['seq']} is used"
        )
        return out
    sha = sha256(data)
    if sha != latest["sha256"]:
        out.update(seq=latest["seq"] + 1, sha256=sha, changed=True)
        out["note"] = f"the satellite file {src} changed since version {latest['seq']}"
    return out


def sync_satellite(ws):
    """Record the satellite file's new content when it changed (the lock held); the version."""
    cur = current_satellite(ws)
    if cur["changed"]:
        record_satellite(ws, cur["source"])
        return {**ws.latest_satellite(), "changed": True, "note": cur["note"]}
    return cur


def set_models(ws, models):
    """Add or update model specs (names or TOML paths) in the workspace's record."""
    specs = dict(ws.meta("specs"))
    for m in models:
        name, text = spec_bytes(m)
        specs[name] = ws.store(text, ".toml")
    with ws.db() as con:
        con.execute("UPDATE meta SET value = ? WHERE key = 'specs'", (json.dumps(specs),))
