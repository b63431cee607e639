"""What a refit would do: the inputs of the next run, their key, and per model whether its last
posterior can be reused, warm-started from, or must be fitted afresh."""

import json

from halo.core.errors import InputError
from halo.products.rundir import posterior_path
from halo.workspace.record import sha256

__all__ = ["plan"]


def _same_inputs(run, name, sha, catalogue, satellite, settings):
    return (
        run["catalogue_sha256"] == catalogue["sha256"]
        and run["satellite_sha256"] == satellite["sha256"]
        and run["settings"] == settings
        and run["specs"].get(name) == sha
    )


def _action(ws, runs, name, sha, catalogue, satellite, settings):
    """("reuse", folder) of the newest run with identical inputs for this model and a
    posterior; else ("warm", folder) of the newest with the same spec; else ("fit", None)."""
    for r in reversed(runs):
        same = _same_inputs(r, name, sha, catalogue, satellite, settings)
        if same and posterior_path(ws.runs / r["folder"], name).is_file():
            return "reuse", r["folder"]
    for r in reversed(runs):
        if r["specs"].get(name) == sha and (ws.runs / r["folder"] / name).is_dir():
            return "warm", r["folder"]
    return "fit", None


def plan(ws, settings):
    """What a refit would do: inputs, their key, and per model reuse / warm start / fit."""
    latest = ws.latest_catalogue()
    if latest is None:
        raise InputError(f"{ws.root}: no catalogue yet; add one with `halo add`")
    sat = ws.latest_satellite()
    specs = ws.meta("specs")
    settings_d = settings.as_dict()
    key_common = json.dumps(
        {"catalogue": latest["sha256"], "satellite": sat["sha256"], "settings": settings_d},
        sort_keys=True,
    )
    runs = ws.runs_list()
    last = runs[-1] if runs else None
    inputs_key = sha256(json.dumps({"common": key_common, "specs": specs}, sort_keys=True).encode())
    per_model = {
        name: _action(ws, runs, name, sha, latest, sat, settings_d) for name, sha in specs.items()
    }
    return {
        "catalogue": latest,
        "satellite": sat,
        "specs": specs,
        "settings": settings_d,
        "inputs_key": inputs_key,
        "models": per_model,
        "up_to_date": last is not None and last["inputs_key"] == inputs_key,
        "last": last,
    }
