"""A refit: fit what changed since the last run, reusing or warm-starting the rest, safely.

A run is built in runs/.partial-NNNN and renamed into place only when complete, and recorded in
the database after that in one transaction. A process killed at any point therefore leaves the
earlier runs, the record and all catalogue versions as they were (at worst an unfinished
.partial folder, ignored and cleaned up by the next refit).
"""

import json
import os
import shutil
import time

from halo.core import interrupt
from halo.core.fileio import atomic_path, write_text
from halo.workspace.create import record_satellite, set_models, sync_satellite
from halo.workspace.planning import plan as make_plan
from halo.workspace.record import now, open_workspace

__all__ = ["refit", "last_settings", "headline", "action_text"]

_SAYS = {
    "reuse": "unchanged, reusing run {src}",
    "warm": "refit (warm start from run {src}: short warmup, its mass matrix)",
    "warm-full": "refit (warm start from run {src}; full warmup: {why})",
    "fit": "fit",
}


def action_text(action, src, why, force=False):
    """What a refit does with a model, in words (``force``: asked by --force)."""
    text = _SAYS[action].format(src=src, why=why)
    if action == "fit" and why:
        text += f" (no warm start: {why})"
    return text + (" [--force]" if force and action != "reuse" else "")


def headline(summary):
    """The numbers of a run the history shows: stars, and per model convergence, M(<r_1/2),
    effective members, log10 J(0.5 deg) and ln B against stars only where there are."""
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


def _staged_specs(ws, specs):
    """Paths of stable, immutable copies of the specs under their own names (a spec's file
    name is its model name)."""
    paths = []
    for name, sha in specs.items():
        named = ws.root / "specs" / sha / f"{name}.toml"
        if not named.is_file():
            with atomic_path(named) as tmp:
                shutil.copyfile(ws.object_path(sha, ".toml"), tmp)
        paths.append(str(named))
    return paths


def _sources(ws, plan):
    """({model: run folder to reuse}, {model: run folder to warm-start from})."""
    actions = plan["models"].items()
    reuse = {n: ws.runs / src for n, (a, src, _) in actions if a == "reuse"}
    warm = {n: ws.runs / src for n, (a, src, _) in actions if a in ("warm", "warm-full")}
    return reuse, warm


def _say_fallbacks(summary, say):
    """A line per model whose warm start fell back to a cold start (with its reason)."""
    for n, m in summary["models"].items():
        w = m.get("warm_start") or {}
        if w.get("fallback"):
            say(
                f"{n}: the warm start from {w['from']} failed ({w['reason']}): fitted from a "
                f"cold start with the full warmup ({w['warmup']})"
            )


def _record(ws, seq, folder, started, plan, wall, reuse, summary):
    ws.record_run(
        {
            "seq": seq,
            "folder": folder,
            "started": started,
            "finished": now(),
            "catalogue_seq": plan["catalogue"]["seq"],
            "catalogue_sha256": plan["catalogue"]["sha256"],
            "satellite_sha256": plan["satellite"]["sha256"],
            "specs": plan["specs"],
            "settings": plan["settings"],
            "inputs_key": plan["inputs_key"],
            "wall_s": wall,
            "reused": {n: str(p.name) for n, p in reuse.items()},
            "headline": headline(summary),
            "version": summary["version"],
        }
    )


def _run(ws, plan, settings, seq, force, say):
    """Fit into runs/.partial-NNNN, rename it to runs/NNNN and record it; returns wall seconds.
    Interrupted or failed, the partial folder is removed (the record is written last)."""
    from halo.inputs.catalogue import read_catalogue
    from halo.inputs.satellite import read_satellite
    from halo.pipeline.fit import fit

    folder = f"{seq:04d}"
    partial = ws.runs / f".partial-{folder}"
    sat_path = ws.satellite_path()
    sat = read_satellite(sat_path)
    stars = read_catalogue(ws.catalogue_path(plan["catalogue"]["sha256"]), sat)
    models = _staged_specs(ws, plan["specs"])
    reuse, warm = _sources(ws, plan)
    for n, (a, src, why) in plan["models"].items():
        say(f"{n}: " + action_text(a, src, why, force))
    started = now()
    t0 = time.perf_counter()
    partial.mkdir(parents=True)
    try:
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
        interrupt.check()  # a Ctrl-C swallowed during the fit still stops the refit here
    except BaseException:
        shutil.rmtree(partial, ignore_errors=True)
        raise
    os.replace(partial, ws.runs / folder)
    _record(ws, seq, folder, started, plan, wall, reuse, summary)
    _say_fallbacks(summary, say)
    return wall


def _update_satellite(ws, satellite, say):
    """Record ``satellite`` (a path) as the satellite file, or the recorded file's new content
    when it changed since its latest version (the lock held)."""
    if satellite is not None:
        if record_satellite(ws, satellite):
            seq = ws.latest_satellite()["seq"]
            say(f"satellite file {satellite} recorded as version {seq}")
        return
    sat = sync_satellite(ws)
    if sat["changed"]:
        say(f"{sat['note']}: recorded as version {sat['seq']}")


def refit(root, settings=None, force=False, say=print, models=None, satellite=None):
    """Fit what changed since the last run; returns (run folder, message).

    ``models``: spec names or paths to add to (or update in) the workspace first;
    ``satellite``: a satellite file to record as the workspace's satellite file first (else the
    recorded file is re-read, and its new content recorded when it changed).
    """
    from halo.pipeline.fit import FitSettings

    settings = FitSettings() if settings is None else settings
    ws = open_workspace(root)
    with ws.lock("refit"):
        if models:
            set_models(ws, models)
        _update_satellite(ws, satellite, say)
        for stale in ws.runs.glob(".partial-*"):  # left by a killed refit
            shutil.rmtree(stale, ignore_errors=True)
        plan = make_plan(ws, settings, force=force)
        if plan["up_to_date"] and not force:
            last = plan["last"]
            return ws.runs / last["folder"], (
                f"nothing changed since run {last['seq']}: results in {ws.runs / last['folder']}"
            )
        seq = (plan["last"]["seq"] if plan["last"] else 0) + 1
        wall = _run(ws, plan, settings, seq, force, say)
    folder = ws.runs / f"{seq:04d}"
    return folder, f"run {seq} written to {folder} ({wall:.0f} s)"


def last_settings(root, **overrides):
    """FitSettings of the workspace's last run (defaults before the first), with ``overrides``
    (None values ignored): a refit keeps the settings the user chose before."""
    from halo.pipeline.fit import FitSettings

    ws = open_workspace(root)
    runs = ws.runs_list()
    base = dict(runs[-1]["settings"]) if runs else {}
    base.update({k: v for k, v in overrides.items() if v is not None})
    if base.get("anisotropy") == "spec":  # back to each spec's own anisotropy
        del base["anisotropy"]
    fields = {f for f in FitSettings.__dataclass_fields__}
    return FitSettings(**{k: v for k, v in base.items() if k in fields})
