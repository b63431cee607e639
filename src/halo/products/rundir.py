"""The one reader of a fit output folder (``summary.json`` and ``<model>/posterior.nc``).

Export, reuse and warm starts of a refit, and the command line read run folders through these
functions, so a damaged folder gives the same one-line error everywhere. The HTML report checks
summary.json itself (:mod:`halo.products.report_sources`): it also renders runs whose catalogue
was not read from a file (no hash) and requires the keys its sections use.
"""

import json
from pathlib import Path

import numpy as np

from halo.core.errors import InputError
from halo.core.fileio import read_input_text
from halo.core.vocabulary import STARS_ONLY

__all__ = [
    "SUMMARY_NAME",
    "read_summary",
    "require_model_keys",
    "model_spec",
    "read_run",
    "read_posterior",
    "load_posterior",
    "posterior_path",
]

SUMMARY_NAME = "summary.json"

#: keys every summary.json has, with their JSON types
_SUMMARY_KEYS = {
    "version": str,
    "created": str,
    "satellite": dict,
    "catalogue": dict,
    "settings": dict,
    "models": dict,
}


def _error(path, msg):
    return InputError(f"{path}: {msg}")


def _kind(kind):
    return {str: "a string", dict: "a table", bool: "true or false"}.get(kind, kind.__name__)


def read_summary(run_dir):
    """The summary.json of a fit output folder, checked for the keys every run has.

    Raises :class:`halo.core.errors.InputError` (one line naming the file and key) when the
    folder or its summary cannot be used.
    """
    run_dir = Path(run_dir)
    if not run_dir.is_dir():
        raise InputError(f"{run_dir}: no such folder (expected a halo fit output folder)")
    path = run_dir / SUMMARY_NAME
    text = read_input_text(path, "no such file (not a halo fit output folder?)")
    try:
        summary = json.loads(text)
    except json.JSONDecodeError as exc:
        raise _error(path, f"not valid JSON (line {exc.lineno}, column {exc.colno})") from None
    if not isinstance(summary, dict):
        raise _error(path, "top level must be an object")
    for key, kind in _SUMMARY_KEYS.items():
        if key not in summary:
            raise _error(path, f"missing key '{key}'")
        if not isinstance(summary[key], kind):
            raise _error(path, f"key '{key}' must be {_kind(kind)}")
    if not isinstance(summary["satellite"].get("name"), str):
        raise _error(path, "missing key 'satellite.name'")
    if not isinstance(summary["catalogue"].get("sha256"), str):
        raise _error(path, "missing key 'catalogue.sha256'")
    require_model_keys(summary, path, {"converged": bool})
    return summary


def require_model_keys(summary, path, kinds):
    """InputError naming the first key of ``kinds`` (key -> type) that a model lacks."""
    for name, entry in summary["models"].items():
        if not isinstance(entry, dict):
            raise _error(path, f"key 'models.{name}' must be a table")
        for key, kind in kinds.items():
            if not isinstance(entry.get(key), kind):
                raise _error(path, f"key 'models.{name}.{key}' must be {_kind(kind)}")


def model_spec(name, source, where):
    """A model's spec: the recorded spec file when it is a user file, else the shipped one."""
    from halo.inputs.spec import load_spec

    shipped = source is None or str(source) == f"models/{name}.toml"
    if not shipped and Path(str(source)).is_file():
        return load_spec(Path(str(source)))
    try:
        return load_spec(name)
    except InputError as exc:
        raise _error(
            where, f"key 'models.{name}': cannot load its spec (spec_source {source!r}: {exc})"
        ) from None


def read_run(run_dir):
    """(summary, satellite, {model: spec}) of a fit output folder, dark models only."""
    from halo.inputs.satellite import parse_satellite
    from halo.inputs.spec_anisotropy import with_anisotropy

    summary = read_summary(run_dir)
    path = Path(run_dir) / SUMMARY_NAME
    satellite = parse_satellite(summary["satellite"], source=f"{path} key 'satellite'")
    specs = {}
    for name, entry in summary["models"].items():
        if name == STARS_ONLY:
            continue
        spec = model_spec(name, entry.get("spec_source"), path)
        spec = with_anisotropy(spec, summary.get("settings", {}).get("anisotropy"))
        if spec.has_dark:
            specs[name] = spec
    if not specs:
        raise _error(path, "no model with a dark halo to export")
    return summary, satellite, specs


def posterior_path(run_dir, name):
    """Where a model's posterior lives in a run folder."""
    return Path(run_dir) / name / "posterior.nc"


def read_posterior(path, sites):
    """{site: array (chain, draw)} of the posterior group of an arviz netCDF file.

    ``sites`` are the variables needed; each must have dims exactly (chain, draw) and finite
    values.
    """
    import xarray as xr

    path = Path(path)
    if not path.is_file():
        raise _error(path, "no such file")
    try:
        with xr.open_datatree(path) as tree:
            if "posterior" not in tree.children:
                raise _error(path, "no 'posterior' group")
            ds = tree["posterior"].to_dataset()
            out = {}
            for s in sites:
                if s not in ds.data_vars:
                    raise _error(path, f"group 'posterior' has no variable '{s}'")
                var = ds[s]
                if var.dims != ("chain", "draw"):
                    raise _error(
                        path, f"variable '{s}' must have dims (chain, draw), got {var.dims}"
                    )
                out[s] = np.asarray(var.values, dtype=float)
    except InputError:
        raise
    except Exception as exc:  # noqa: BLE001  (netCDF/HDF5 readers raise many kinds)
        raise _error(path, f"cannot read as netCDF ({exc.__class__.__name__})") from None
    for s, v in out.items():
        if not np.all(np.isfinite(v)):
            raise _error(path, f"variable '{s}' has non-finite values")
    return out


def load_posterior(run_dir, name):
    """(idata, samples) of model ``name`` in a run folder, the samples flattened over chains
    (chain-major, as numpyro's ``get_samples``)."""
    import arviz as az

    path = posterior_path(run_dir, name)
    if not path.is_file():
        raise _error(path, "no such file")
    idata = az.from_netcdf(str(path))
    post = idata["posterior"]
    samples = {}
    for k in post.data_vars:
        a = np.asarray(post[k].values)
        samples[k] = a.reshape((-1,) + a.shape[2:])
    return idata, samples
