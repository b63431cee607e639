"""A new workspace for a satellite file, and new versions of its satellite file and model specs.

The satellite file and every model spec are stored as immutable objects under their hash; the
record keeps the satellite versions in order and the current spec of each model by name.
"""

import contextlib
import json
import os
import sqlite3
from importlib import resources
from pathlib import Path

from halo.core.errors import InputError
from halo.core.vocabulary import DEFAULT_MODELS, STARS_ONLY
from halo.workspace.record import DB_NAME, SCHEMA, Workspace, now, open_workspace

__all__ = ["init_workspace", "set_satellite", "set_models", "spec_bytes"]


def spec_bytes(name):
    """(name, TOML bytes) of a model spec given by shipped name or path."""
    from halo.inputs.spec import available_specs, load_spec

    spec = load_spec(name)  # validates (InputError on bad specs)
    path = Path(str(name))
    if path.suffix == ".toml" or path.exists():
        return spec.name, path.read_bytes()
    if name in available_specs():
        return spec.name, resources.files("halo.models").joinpath(f"{name}.toml").read_bytes()
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
    if (root / DB_NAME).exists():
        raise InputError(f"{root}: already a halo workspace")
    if root.exists() and any(root.iterdir()):
        raise InputError(f"{root}: folder exists and is not empty; choose a new folder")
    read_satellite(satellite_file)  # validates
    data = Path(satellite_file).read_bytes()
    specs = _specs(models)
    root.mkdir(parents=True, exist_ok=True)
    ws = Workspace(root)
    ws.objects.mkdir(exist_ok=True)
    ws.runs.mkdir(exist_ok=True)
    with ws.lock("init"):
        sat_sha = ws.store(data, ".toml")
        spec_shas = {n: ws.store(t, ".toml") for n, t in specs.items()}
        _new_database(ws, sat_sha, satellite_file, spec_shas)
    return ws


def set_satellite(root, satellite_file):
    """Record a new satellite file version (the next refit uses it)."""
    from halo.inputs.satellite import read_satellite

    ws = open_workspace(root)
    read_satellite(satellite_file)
    data = Path(satellite_file).read_bytes()
    with ws.lock("satellite"):
        sha = ws.store(data, ".toml")
        if sha == ws.latest_satellite()["sha256"]:
            return False
        with ws.db() as con:
            con.execute(
                "INSERT INTO satellite_versions (sha256, created, source) VALUES (?, ?, ?)",
                (sha, now(), str(Path(satellite_file).resolve())),
            )
    return True


def set_models(ws, models):
    """Add or update model specs (names or TOML paths) in the workspace's record."""
    specs = dict(ws.meta("specs"))
    for m in models:
        name, text = spec_bytes(m)
        specs[name] = ws.store(text, ".toml")
    with ws.db() as con:
        con.execute("UPDATE meta SET value = ? WHERE key = 'specs'", (json.dumps(specs),))
