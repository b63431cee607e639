"""Satellite workspaces: catalogue versions, runs and their history, safe against crashes.

Layout of a workspace folder DIR::

    DIR/workspace.sqlite        the record: catalogue versions, satellite and spec versions, runs
    DIR/objects/<sha256>.ecsv   catalogue versions (immutable, named by the hash of their content)
    DIR/objects/<sha256>.toml   satellite file and model spec versions (immutable)
    DIR/specs/<sha256>/<name>.toml   the same specs under their model names (immutable)
    DIR/runs/<NNNN>/            one fit output folder per run (summary.json, posteriors, figures)
    DIR/.lock                   held (fcntl) by the command that writes

Catalogue versions are whole tables (id, ra, dec, vlos, vlos_err, mjd[, member_prob]) in a
canonical form (rows sorted by id and epoch, fixed column order and units), so the same content
always gets the same hash and adding the same file twice changes nothing. A new measurement of a
star at an epoch already recorded with a different value is refused unless ``replace`` is asked;
the old version stays in objects/ and in the record.

Every file is written atomically (temporary file + rename); a run is built in runs/.partial-NNNN
and renamed into place only when complete, and recorded in the database after that in one
transaction. A process killed at any point therefore leaves the earlier runs, the record and all
catalogue versions as they were (at worst an unfinished .partial folder, ignored and cleaned up
by the next refit).
"""

import contextlib
import datetime
import fcntl
import hashlib
import json
import os
import shutil
import sqlite3
from pathlib import Path

import numpy as np

from halo.core.errors import InputError
from halo.core.fileio import atomic_path, write_text

__all__ = [
    "init_workspace",
    "add_catalogue",
    "refit",
    "status",
    "history",
    "Workspace",
]

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
COLUMNS = ("id", "ra", "dec", "vlos", "vlos_err", "mjd", "member_prob")


def _now():
    return datetime.datetime.now(datetime.UTC).isoformat(timespec="seconds")


def _sha(data):
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
        con = sqlite3.connect(self.db_path, timeout=30)
        try:
            with con:  # one transaction: committed on success, rolled back on error
                yield con
        finally:
            con.close()

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
                "SELECT seq, sha256 FROM satellite_versions ORDER BY seq DESC LIMIT 1"
            ).fetchone()
        return dict(zip(("seq", "sha256"), row, strict=True))

    def runs_list(self):
        keys = (
            "seq", "folder", "started", "finished", "catalogue_seq", "catalogue_sha256",
            "satellite_sha256", "specs", "settings", "inputs_key", "wall_s", "reused",
            "headline", "version",
        )  # fmt: skip
        with self.db() as con:
            rows = con.execute(f"SELECT {', '.join(keys)} FROM runs ORDER BY seq").fetchall()
        out = []
        for r in rows:
            d = dict(zip(keys, r, strict=True))
            for k in ("specs", "settings", "reused", "headline"):
                d[k] = json.loads(d[k])
            out.append(d)
        return out

    # ------------------------------------------------------------------ objects
    def object_path(self, sha, suffix):
        return self.objects / f"{sha}{suffix}"

    def store(self, data, suffix):
        """Store bytes under their hash (no-op when present); returns the hash."""
        sha = _sha(data)
        path = self.object_path(sha, suffix)
        if not path.exists():
            with atomic_path(path) as tmp:
                tmp.write_bytes(data)
        return sha

    def satellite_path(self):
        return self.object_path(self.latest_satellite()["sha256"], ".toml")

    def catalogue_path(self, sha):
        return self.object_path(sha, ".ecsv")

    # ------------------------------------------------------------------ lock
    @contextlib.contextmanager
    def lock(self, what):
        path = self.root / ".lock"
        fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
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
    return ws


def _spec_bytes(name):
    """(name, TOML bytes) of a model spec given by shipped name or path."""
    from importlib import resources

    from halo.inputs.spec import available_specs, load_spec

    spec = load_spec(name)  # validates (InputError on bad specs)
    path = Path(str(name))
    if path.suffix == ".toml" or path.exists():
        return spec.name, path.read_bytes()
    if name in available_specs():
        return spec.name, resources.files("halo.models").joinpath(f"{name}.toml").read_bytes()
    raise InputError(f"unknown model '{name}'")


def init_workspace(root, satellite_file, models=None):
    """Create a workspace at ``root`` for the satellite file; returns the Workspace."""
    from halo.inputs.satellite import read_satellite
    from halo.pipeline.fit import DEFAULT_MODELS, STARS_ONLY

    root = Path(root)
    if (root / DB_NAME).exists():
        raise InputError(f"{root}: already a halo workspace")
    if root.exists() and any(root.iterdir()):
        raise InputError(f"{root}: folder exists and is not empty; choose a new folder")
    read_satellite(satellite_file)  # validates
    data = Path(satellite_file).read_bytes()
    specs = {}
    for m in models or DEFAULT_MODELS:
        name, text = _spec_bytes(m)
        specs[name] = text
    if STARS_ONLY not in specs:  # always fitted: every model is compared with it
        specs[STARS_ONLY] = _spec_bytes(STARS_ONLY)[1]
    root.mkdir(parents=True, exist_ok=True)
    ws = Workspace(root)
    ws.objects.mkdir(exist_ok=True)
    ws.runs.mkdir(exist_ok=True)
    with ws.lock("init"):
        sat_sha = ws.store(data, ".toml")
        spec_shas = {n: ws.store(t, ".toml") for n, t in specs.items()}
        tmp_db = root / f".{DB_NAME}.part"
        with contextlib.suppress(FileNotFoundError):
            tmp_db.unlink()
        con = sqlite3.connect(tmp_db)
        with con:
            con.executescript(SCHEMA)
            con.execute(
                "INSERT INTO satellite_versions (sha256, created, source) VALUES (?, ?, ?)",
                (sat_sha, _now(), str(Path(satellite_file).resolve())),
            )
            con.execute("INSERT INTO meta VALUES ('specs', ?)", (json.dumps(spec_shas),))
            con.execute("INSERT INTO meta VALUES ('created', ?)", (json.dumps(_now()),))
        con.close()
        os.replace(tmp_db, ws.db_path)
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
                (sha, _now(), str(Path(satellite_file).resolve())),
            )
    return True


# ---------------------------------------------------------------------- catalogue versions


def _rows_from_stars(stars):
    """Per-epoch rows of a StarData as a dict of arrays in canonical units."""
    es = np.asarray(stars.epoch_star)
    rows = {
        "id": np.asarray(stars.id).astype(str)[es],
        "ra": np.asarray(stars.ra, dtype=float)[es],
        "dec": np.asarray(stars.dec, dtype=float)[es],
        "vlos": np.asarray(stars.epoch_v, dtype=float),
        "vlos_err": np.asarray(stars.epoch_err, dtype=float),
        "mjd": np.asarray(stars.epoch_mjd, dtype=float),
    }
    if stars.member_prob is not None:
        rows["member_prob"] = np.asarray(stars.member_prob, dtype=float)[es]
    return rows


def _canonical_bytes(rows):
    """A deterministic ECSV text of the rows (sorted by id, then epoch)."""
    from astropy import units as u
    from astropy.table import Table

    mjd_key = np.where(np.isnan(rows["mjd"]), -np.inf, rows["mjd"])
    order = np.lexsort((mjd_key, rows["id"]))
    t = Table()
    units = {"ra": u.deg, "dec": u.deg, "vlos": u.km / u.s, "vlos_err": u.km / u.s}
    for c in COLUMNS:
        if c not in rows:
            continue
        if c == "mjd" and np.all(np.isnan(rows["mjd"])):
            continue
        col = rows[c][order]
        t[c] = col if c not in units else col * units[c]
    for c in ("ra", "dec", "vlos", "vlos_err", "mjd", "member_prob"):
        if c in t.colnames:
            t[c].info.format = ".17g"
    t.meta.clear()
    import io

    buf = io.StringIO()
    t.write(buf, format="ascii.ecsv")
    return buf.getvalue().encode()


def _read_rows(path):
    from astropy.table import Table

    t = Table.read(path, format="ascii.ecsv")
    rows = {c: np.asarray(t[c]) for c in t.colnames}
    rows["id"] = rows["id"].astype(str)
    for c in ("ra", "dec", "vlos", "vlos_err", "member_prob"):
        if c in rows:
            rows[c] = rows[c].astype(float)
    rows["mjd"] = rows["mjd"].astype(float) if "mjd" in rows else np.full(len(t), np.nan)
    return rows


def _same(a, b):
    return np.isclose(a, b, rtol=1e-12, atol=1e-12)


def add_catalogue(root, catalogue, columns=None, replace=False):
    """Merge a catalogue's stars and epochs into the workspace; returns a dict describing it.

    Rows are matched by (id, mjd). A matching row with the same values changes nothing; one with
    different values is a conflict (InputError naming the file, row and id) unless ``replace``.
    Returns {"changed": bool, "seq", "sha256", "added", "replaced", "n_rows", "n_stars"}.
    """
    from halo.inputs.catalogue import read_catalogue
    from halo.inputs.satellite import read_satellite

    ws = open_workspace(root)
    catalogue = Path(catalogue)
    with ws.lock("add"):
        sat = read_satellite(ws.satellite_path())
        stars = read_catalogue(catalogue, sat, columns)
        if "id" not in stars.columns:
            raise InputError(
                f"{catalogue}: a workspace needs an id column to match stars between catalogues"
            )
        new = _rows_from_stars(stars)
        row_no = np.asarray(stars.epoch_row)
        latest = ws.latest_catalogue()
        if latest is None:
            merged, added, replaced = new, len(new["id"]), 0
        else:
            old = _read_rows(ws.catalogue_path(latest["sha256"]))
            if ("member_prob" in old) != ("member_prob" in new):
                raise InputError(
                    f"{catalogue}: member_prob is given in "
                    f"{'this file' if 'member_prob' in new else 'the workspace'} only; every "
                    "batch must carry it or none"
                )
            index = {
                (i, None if np.isnan(m) else float(m)): k
                for k, (i, m) in enumerate(zip(old["id"], old["mjd"], strict=True))
            }
            keep_new = np.zeros(len(new["id"]), dtype=bool)
            replace_old = []
            for k in range(len(new["id"])):
                key = (new["id"][k], None if np.isnan(new["mjd"][k]) else float(new["mjd"][k]))
                j = index.get(key)
                if j is None:
                    keep_new[k] = True
                    continue
                fields = [c for c in ("ra", "dec", "vlos", "vlos_err", "member_prob") if c in new]
                diff = [c for c in fields if not _same(new[c][k], old[c][j])]
                if not diff:
                    continue
                if not replace:
                    epoch = "" if key[1] is None else f" at mjd {key[1]:g}"
                    raise InputError(
                        f"{catalogue}: row {row_no[k]}, column '{diff[0]}': star '{key[0]}'"
                        f"{epoch} is already in catalogue version {latest['seq']} with "
                        f"{diff[0]} = {old[diff[0]][j]:g}, here {new[diff[0]][k]:g}; use "
                        "--replace to supersede it (the old version stays retrievable)"
                    )
                replace_old.append(j)
                keep_new[k] = True
            drop = np.zeros(len(old["id"]), dtype=bool)
            drop[replace_old] = True
            merged = {c: np.concatenate([old[c][~drop], new[c][keep_new]]) for c in old if c in new}
            added = int(keep_new.sum()) - len(replace_old)
            replaced = len(replace_old)
        data = _canonical_bytes(merged)
        sha = _sha(data)
        n_rows = len(merged["id"])
        n_stars = len(np.unique(merged["id"]))
        if latest is not None and sha == latest["sha256"]:
            return {"changed": False, "seq": latest["seq"], "sha256": sha, "added": 0,
                    "replaced": 0, "n_rows": n_rows, "n_stars": n_stars}  # fmt: skip
        ws.store(data, ".ecsv")
        with ws.db() as con:
            cur = con.execute(
                "INSERT INTO catalogue_versions (sha256, parent, created, n_rows, n_stars, "
                "added_rows, replaced_rows, source, source_sha256) VALUES (?,?,?,?,?,?,?,?,?)",
                (
                    sha,
                    None if latest is None else latest["seq"],
                    _now(),
                    n_rows,
                    n_stars,
                    added,
                    replaced,
                    str(catalogue.resolve()),
                    _sha(catalogue.read_bytes()),
                ),
            )
            seq = cur.lastrowid
    return {"changed": True, "seq": seq, "sha256": sha, "added": added, "replaced": replaced,
            "n_rows": n_rows, "n_stars": n_stars}  # fmt: skip


# ---------------------------------------------------------------------- runs


def _settings_key(settings):
    return settings.as_dict()


def _plan(ws, settings):
    """What a refit would do: inputs, their key, and per model reuse / warm start / fit."""
    latest = ws.latest_catalogue()
    if latest is None:
        raise InputError(f"{ws.root}: no catalogue yet; add one with `halo add`")
    sat = ws.latest_satellite()
    specs = ws.meta("specs")
    settings_d = _settings_key(settings)
    key_common = json.dumps(
        {"catalogue": latest["sha256"], "satellite": sat["sha256"], "settings": settings_d},
        sort_keys=True,
    )
    runs = ws.runs_list()
    last = runs[-1] if runs else None
    inputs_key = _sha(json.dumps({"common": key_common, "specs": specs}, sort_keys=True).encode())
    per_model = {}
    for name, sha in specs.items():
        action, source = "fit", None
        for r in reversed(runs):  # the newest run with identical inputs for this model
            same = (
                r["catalogue_sha256"] == latest["sha256"]
                and r["satellite_sha256"] == sat["sha256"]
                and r["settings"] == settings_d
                and r["specs"].get(name) == sha
            )
            if same and (ws.runs / r["folder"] / name / "posterior.nc").is_file():
                action, source = "reuse", r["folder"]
                break
        if action == "fit":
            for r in reversed(runs):
                if r["specs"].get(name) == sha and (ws.runs / r["folder"] / name).is_dir():
                    action, source = "warm", r["folder"]
                    break
        per_model[name] = (action, source)
    up_to_date = last is not None and last["inputs_key"] == inputs_key
    return {
        "catalogue": latest,
        "satellite": sat,
        "specs": specs,
        "settings": settings_d,
        "inputs_key": inputs_key,
        "models": per_model,
        "up_to_date": up_to_date,
        "last": last,
    }


def _headline(summary):
    out = {"n_stars": summary["catalogue"]["n_stars"], "models": {}}
    for name, m in summary["models"].items():
        d = m["derived"]
        h = {
            "converged": m["converged"],
            "m_half_msun": d["m_half_msun"],
            "effective_members": m.get("effective_members"),
        }
        if d.get("log10_j"):
            h["log10_j_0.5"] = d["log10_j"]["0.5"]
        if m.get("vs_stars_only"):
            h["ln_bayes_factor"] = m["vs_stars_only"]["ln_bayes_factor"]
            h["ln_bayes_factor_err"] = m["vs_stars_only"]["ln_bayes_factor_err"]
        out["models"][name] = h
    return out


def set_models(ws, models):
    """Add or update model specs (names or TOML paths) in the workspace's record."""
    specs = dict(ws.meta("specs"))
    for m in models:
        name, text = _spec_bytes(m)
        specs[name] = ws.store(text, ".toml")
    with ws.db() as con:
        con.execute("UPDATE meta SET value = ? WHERE key = 'specs'", (json.dumps(specs),))


def refit(root, settings=None, force=False, say=print, models=None):
    """Fit what changed since the last run; returns (run folder, message).

    ``models``: spec names or paths to add to (or update in) the workspace first.
    """
    import time

    from halo.inputs.catalogue import read_catalogue
    from halo.inputs.satellite import read_satellite
    from halo.pipeline.fit import FitSettings, fit

    settings = FitSettings() if settings is None else settings
    ws = open_workspace(root)
    with ws.lock("refit"):
        if models:
            set_models(ws, models)
        for stale in ws.runs.glob(".partial-*"):  # left by a killed refit
            shutil.rmtree(stale, ignore_errors=True)
        plan = _plan(ws, settings)
        if plan["up_to_date"] and not force:
            last = plan["last"]
            return ws.runs / last["folder"], (
                f"nothing changed since run {last['seq']}: results in {ws.runs / last['folder']}"
            )
        seq = (plan["last"]["seq"] if plan["last"] else 0) + 1
        folder = f"{seq:04d}"
        partial = ws.runs / f".partial-{folder}"
        partial.mkdir(parents=True)
        sat_path = ws.satellite_path()
        sat = read_satellite(sat_path)
        stars = read_catalogue(ws.catalogue_path(plan["catalogue"]["sha256"]), sat)
        models = []
        for name, sha in plan["specs"].items():
            # a stable, immutable copy under the spec's own name (its file name is its name)
            named = ws.root / "specs" / sha / f"{name}.toml"
            if not named.is_file():
                with atomic_path(named) as tmp:
                    shutil.copyfile(ws.object_path(sha, ".toml"), tmp)
            models.append(str(named))
        reuse = {
            n: ws.runs / src for n, (a, src) in plan["models"].items() if a == "reuse" and not force
        }
        warm = {n: ws.runs / src for n, (a, src) in plan["models"].items() if a == "warm"}
        for n, (a, src) in plan["models"].items():
            say(
                f"{n}: "
                + {
                    "reuse": f"unchanged, reusing run {src}",
                    "warm": f"refit (warm start from run {src})",
                    "fit": "fit",
                }[a]  # fmt: skip
            )
        started = _now()
        t0 = time.perf_counter()
        summary = fit(
            stars, sat, partial, models, settings, satellite_path=sat_path, reuse=reuse,
            warm=warm,
        )  # fmt: skip
        wall = time.perf_counter() - t0
        summary_ws = {
            "run": seq,
            "catalogue_version": plan["catalogue"]["seq"],
            "catalogue_version_sha256": plan["catalogue"]["sha256"],
        }
        write_text(partial / "workspace_run.json", json.dumps(summary_ws, indent=1) + "\n")
        os.replace(partial, ws.runs / folder)
        with ws.db() as con:
            con.execute(
                "INSERT INTO runs (seq, folder, started, finished, catalogue_seq, "
                "catalogue_sha256, satellite_sha256, specs, settings, inputs_key, wall_s, "
                "reused, headline, version) VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
                (
                    seq,
                    folder,
                    started,
                    _now(),
                    plan["catalogue"]["seq"],
                    plan["catalogue"]["sha256"],
                    plan["satellite"]["sha256"],
                    json.dumps(plan["specs"]),
                    json.dumps(plan["settings"]),
                    plan["inputs_key"],
                    wall,
                    json.dumps({n: str(p.name) for n, p in reuse.items()}),
                    json.dumps(_headline(summary)),
                    summary["version"],
                ),
            )
    return ws.runs / folder, f"run {seq} written to {ws.runs / folder} ({wall:.0f} s)"


def last_settings(root, **overrides):
    """FitSettings of the workspace's last run (defaults before the first), with ``overrides``
    (None values ignored): a refit keeps the settings the user chose before."""
    from halo.pipeline.fit import FitSettings

    ws = open_workspace(root)
    runs = ws.runs_list()
    base = dict(runs[-1]["settings"]) if runs else {}
    base.update({k: v for k, v in overrides.items() if v is not None})
    fields = {f for f in FitSettings.__dataclass_fields__}
    return FitSettings(**{k: v for k, v in base.items() if k in fields})


def status(root, settings=None):
    """A dict saying what is stale and what the next refit (with the last run's settings unless
    ``settings`` is given) would do."""
    ws = open_workspace(root)
    settings = last_settings(root) if settings is None else settings
    latest = ws.latest_catalogue()
    out = {
        "workspace": str(ws.root),
        "catalogue": latest,
        "satellite": ws.latest_satellite(),
        "models": ws.meta("specs"),
        "runs": len(ws.runs_list()),
    }
    if latest is None:
        out["stale"] = ["no catalogue yet: add one with `halo add`"]
        out["next"] = {}
        return out
    plan = _plan(ws, settings)
    last = plan["last"]
    stale = []
    if last is None:
        stale.append("never fitted")
    else:
        if last["catalogue_sha256"] != latest["sha256"]:
            stale.append(
                f"catalogue version {latest['seq']} is newer than the one of run {last['seq']} "
                f"(version {last['catalogue_seq']})"
            )
        if last["satellite_sha256"] != plan["satellite"]["sha256"]:
            stale.append("the satellite file changed since the last run")
        for n, sha in plan["specs"].items():
            if last["specs"].get(n) != sha:
                stale.append(f"model {n} is new or its spec changed")
        if last["settings"] != plan["settings"]:
            stale.append("the fit settings differ from the last run's")
    out["stale"] = stale
    out["up_to_date"] = plan["up_to_date"]
    out["last_run"] = None if last is None else {"seq": last["seq"], "folder": last["folder"]}
    out["next"] = {n: a for n, (a, _) in plan["models"].items()}
    return out


def latest_run_folder(root):
    """The newest recorded run's folder (InputError when there is none)."""
    ws = open_workspace(root)
    runs = ws.runs_list()
    if not runs:
        raise InputError(f"{root}: no runs yet; `halo refit` fits the latest catalogue version")
    return ws.runs / runs[-1]["folder"]


def history(root):
    """Per run: time, catalogue version, stars, and per model the headline results."""
    ws = open_workspace(root)
    out = []
    for r in ws.runs_list():
        out.append(
            {
                "run": r["seq"],
                "folder": r["folder"],
                "finished": r["finished"],
                "catalogue_version": r["catalogue_seq"],
                "catalogue_sha256": r["catalogue_sha256"],
                "wall_s": r["wall_s"],
                "reused": r["reused"],
                **r["headline"],
            }
        )
    return out


def history_figure(root, rows, path=None):
    """history.png: M(<r_1/2), log10 J(0.5 deg), ln B and members against the run number."""
    from halo.products.plots import _plt

    ws = open_workspace(root)
    path = Path(path or ws.root / "history.png")
    plt = _plt()
    fig, axes = plt.subplots(2, 2, figsize=(9, 6.5), sharex=True)
    names = sorted({n for r in rows for n in r["models"]})
    x = [r["run"] for r in rows]
    panels = (
        (axes[0, 0], "m_half_msun", "M(<r_1/2) [Msun]", True),
        (axes[0, 1], "log10_j_0.5", "log10 J(0.5 deg) [GeV^2 cm^-5]", False),
    )
    for ax, key, label, log in panels:
        for n in names:
            pts = [(xx, r["models"][n].get(key)) for xx, r in zip(x, rows, strict=True)
                   if n in r["models"] and r["models"][n].get(key)]  # fmt: skip
            if not pts:
                continue
            xs = [p[0] for p in pts]
            med = np.array([p[1]["median"] for p in pts])
            lo = np.array([p[1]["p16"] for p in pts])
            hi = np.array([p[1]["p84"] for p in pts])
            ax.errorbar(xs, med, yerr=[med - lo, hi - med], marker="o", capsize=3, label=n)
        ax.set_ylabel(label)
        if log:
            ax.set_yscale("log")
    ax = axes[1, 0]
    for n in names:
        pts = [(xx, r["models"][n]) for xx, r in zip(x, rows, strict=True)
               if n in r["models"] and "ln_bayes_factor" in r["models"][n]]  # fmt: skip
        if pts:
            ax.errorbar(
                [p[0] for p in pts],
                [p[1]["ln_bayes_factor"] for p in pts],
                yerr=[p[1]["ln_bayes_factor_err"] for p in pts],
                marker="o",
                capsize=3,
                label=n,
            )
    ax.axhline(0.0, color="0.5", lw=0.8)
    ax.set_ylabel("ln B (vs stars only)")
    ax = axes[1, 1]
    ax.plot(x, [r["n_stars"] for r in rows], "ks-", label="stars in catalogue")
    for n in names:
        ax.plot(
            x,
            [r["models"].get(n, {}).get("effective_members") or np.nan for r in rows],
            "o--",
            label=f"members ({n})",
        )
    ax.set_ylabel("stars")
    for a in axes.ravel():
        a.legend(fontsize=7)
    for a in axes[1]:
        a.set_xlabel("run")
    fig.suptitle(f"history of {ws.root.name}")
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=110)
    plt.close(fig)
    return path
