"""What a refit would do: the inputs of the next run, their key, and per model whether its last
posterior can be reused, warm-started from (with a short or the full warmup), or must be fitted
afresh, and why."""

import functools
import json
import tomllib

from halo.core.errors import InputError
from halo.core.vocabulary import STARS_ONLY
from halo.products.rundir import posterior_path
from halo.workspace.create import current_satellite
from halo.workspace.record import sha256

__all__ = ["plan"]


def _comparison_binaries(ws):
    """A function of a run's specs ({name: sha}) giving the binary table the stars-only
    comparator takes in a fit of them (JSON; None when they would be refused), cached per set."""
    from halo.inputs.spec import parse_spec
    from halo.pipeline.fit import shared_binaries

    @functools.cache
    def key(items):
        if STARS_ONLY not in dict(items):
            return None
        try:
            specs = {}
            for name, sha in items:
                path = ws.verified(sha, ".toml")
                text = path.read_text(encoding="utf-8")
                specs[name] = parse_spec(tomllib.loads(text), name, path)
            return json.dumps(dict(shared_binaries(specs)[STARS_ONLY].binaries), sort_keys=True)
        except (InputError, OSError, tomllib.TOMLDecodeError):  # unreadable or refused: no reuse
            return None

    return lambda specs: key(tuple(sorted(specs.items())))


def _same_inputs(run, name, sha, inputs, binaries_of):
    """Whether model ``name`` of ``run`` had exactly these inputs; for the stars-only comparator
    with binaries on, also the binary table it shares with the dark specs of its fit."""
    catalogue, satellite, settings, specs = inputs
    same = (
        run["catalogue_sha256"] == catalogue["sha256"]
        and run["satellite_sha256"] == satellite["sha256"]
        and run["settings"] == settings
        and run["specs"].get(name) == sha
    )
    if same and name == STARS_ONLY and settings.get("binaries"):
        now = binaries_of(specs)
        return now is not None and binaries_of(run["specs"]) == now
    return same


def _candidate(ws, runs, name, sha, inputs, force):
    """("reuse", folder) of the newest run with identical inputs for this model and a posterior
    (not with ``force``); else ("warm", folder) of the newest with the same spec, the same
    anisotropy choice and a posterior; else ("fit", None)."""
    settings = inputs[2]
    binaries_of = _comparison_binaries(ws)
    for r in [] if force else reversed(runs):
        same = _same_inputs(r, name, sha, inputs, binaries_of)
        if same and posterior_path(ws.runs / r["folder"], name).is_file():
            return "reuse", r["folder"]
    kind = settings.get("anisotropy")  # another anisotropy is another model: no warm start
    for r in reversed(runs):
        same_spec = r["specs"].get(name) == sha and r["settings"].get("anisotropy") == kind
        if same_spec and posterior_path(ws.runs / r["folder"], name).is_file():
            return "warm", r["folder"]
    return "fit", None


def _foreground_on(ws, catalogue, satellite, settings):
    """Whether the next run models the foreground (as :func:`halo.pipeline.fit.fit` decides)."""
    from halo.inputs.catalogue import read_catalogue
    from halo.inputs.satellite import read_satellite
    from halo.pipeline.settings import foreground_setting

    if settings.foreground != "auto":
        return bool(settings.foreground)
    sat_file = satellite["source"] if satellite["changed"] else ws.satellite_path()
    stars = read_catalogue(ws.catalogue_path(catalogue["sha256"]), read_satellite(sat_file))
    return foreground_setting(stars, settings)[0]


def _actions(ws, runs, specs, inputs, settings, force):
    """{model: (action, run folder or None, why or None)}; action "reuse", "warm" (short warmup,
    the earlier mass matrix), "warm-full" (started there, full warmup) or "fit"."""
    from halo.pipeline.warm_start import warm_plan

    fg = []
    out = {}
    for name, sha in specs.items():
        action, src = _candidate(ws, runs, name, sha, inputs, force)
        why = None
        if action == "warm":
            if not fg:
                fg.append(_foreground_on(ws, inputs[0], inputs[1], settings))
            action, why = warm_plan(ws.runs / src, name, settings, fg[0])
            if action == "fit":
                why = f"run {src}: {why}"
                src = None
        out[name] = (action, src, why)
    return out


def plan(ws, settings, force=False):
    """What a refit would do: inputs, their key, and per model reuse / warm start / fit.

    ``force``: no model is reused (each is warm-started from its newest posterior if any).
    Verifies the catalogue and satellite objects (InputError naming an edited or damaged one).
    """
    latest = ws.latest_catalogue()
    if latest is None:
        raise InputError(f"{ws.root}: no catalogue yet; add one with `halo add`")
    ws.catalogue_path(latest["sha256"])  # verifies the object
    sat = current_satellite(ws)
    if not sat["changed"]:
        ws.satellite_path()  # verifies the object
    specs = ws.meta("specs")
    for sha in specs.values():
        ws.verified(sha, ".toml")
    settings_d = settings.as_dict()
    key_common = json.dumps(
        {"catalogue": latest["sha256"], "satellite": sat["sha256"], "settings": settings_d},
        sort_keys=True,
    )
    runs = ws.runs_list()
    last = runs[-1] if runs else None
    inputs_key = sha256(json.dumps({"common": key_common, "specs": specs}, sort_keys=True).encode())
    inputs = (latest, sat, settings_d, specs)
    return {
        "catalogue": latest,
        "satellite": sat,
        "specs": specs,
        "settings": settings_d,
        "inputs_key": inputs_key,
        "models": _actions(ws, runs, specs, inputs, settings, force),
        "up_to_date": last is not None and last["inputs_key"] == inputs_key,
        "last": last,
    }
