"""``halo mock``: a mock drawn from a model spec at given parameter values, written as a
catalogue file with its truth beside it (JSON)."""

import json
import math
from pathlib import Path

import numpy as np

from halo.core.errors import InputError
from halo.core.fileio import atomic_path, write_ecsv, write_json
from halo.inputs.build import build_anisotropy, build_dark, check_values
from halo.inputs.catalogue import FORMATS
from halo.inputs.satellite import read_satellite
from halo.inputs.spec import load_spec
from halo.inputs.spec_anisotropy import with_anisotropy
from halo.mock.catalogue import make_mock
from halo.physics.cosmology import rho_crit

__all__ = ["MOCK_FORMATS", "write_mock", "mock_from_spec", "truth_record"]

#: file-name ending (lower case) -> astropy format of the catalogues ``halo mock`` writes (a
#: subset of those the catalogue reader takes)
MOCK_FORMATS = {ext: FORMATS[ext] for ext in (".ecsv", ".fits", ".vot", ".xml", ".csv")}


def _output_format(out):
    """The astropy format for ``out``; InputError when unknown or when the file exists."""
    fmt = MOCK_FORMATS.get(out.suffix.lower())
    if fmt is None:
        raise InputError(f"--out {out}: unknown catalogue format (use .ecsv, .fits, .vot, .csv)")
    if out.exists():
        raise InputError(f"--out {out}: file exists; choose another name")
    return fmt


def mock_from_spec(sat, model, values, anisotropy=None, **options):
    """(mock, spec, checked values): :func:`halo.mock.catalogue.make_mock` of the halo and
    anisotropy a spec (name or path) gives at ``values`` (the satellite's stellar mass unless
    ``stellar_mass`` is among them); ``anisotropy``: a kind replacing the spec's; ``options``
    go to make_mock."""
    spec = with_anisotropy(load_spec(model), anisotropy)
    values = dict(values)
    values.setdefault("stellar_mass", sat.stellar_mass_prior()[0])
    values = check_values(spec, values)
    dark = build_dark(spec, values, rho_crit())
    anis = build_anisotropy(spec, values)
    mock = make_mock(sat, dark, values["stellar_mass"], anis, **options)
    return mock, spec, values


def truth_record(mock, spec, values):
    """The mock's truth as plain JSON values (infinities as null), with the binaries' ids, the
    model's name and its parameter values."""
    truth = dict(mock.truth)
    truth["binary_ids"] = [int(i) for i in np.flatnonzero(np.asarray(mock.stars["is_binary"]))]
    truth["model"] = spec.name
    truth["parameters"] = {
        k: (None if isinstance(v, float) and math.isinf(v) else v) for k, v in values.items()
    }
    return json.loads(json.dumps(truth, default=float).replace("Infinity", "null"))


def _write_table(table, out, fmt, truth):
    table.meta.clear()
    if fmt == "ascii.ecsv":  # only ECSV keeps a nested record in its header
        table.meta["truth"] = truth
        write_ecsv(out, table)
        return
    with atomic_path(out) as tmp:
        table.write(str(tmp), format=fmt, overwrite=True)


def write_mock(
    satellite_path,
    out,
    model,
    values,
    *,
    n_stars,
    v_sys,
    error_range,
    method,
    seed,
    epochs_mjd=None,
    repeat_fraction=1.0,
    binary_fraction=0.0,
    n_foreground=0,
    anisotropy=None,
    metallicity=None,
    flattening=None,
):
    """``halo mock``: draw a mock from a spec at given parameter values and write it.

    ``metallicity``: None or a :class:`halo.mock.metallicity.MockMetallicity` (feh, feh_err).
    ``flattening``: None or the intrinsic axis ratio of an oblate tracer
    (:func:`halo.mock.catalogue.make_mock`).

    Returns (catalogue path, truth path). The truth JSON sits beside the catalogue.
    """
    out = Path(out)
    fmt = _output_format(out)
    if not math.isfinite(v_sys):
        raise InputError(f"--v-sys: expected a finite velocity [km/s], got {v_sys!r}")
    sat = read_satellite(satellite_path)
    try:
        mock, spec, values = mock_from_spec(
            sat,
            model,
            values,
            n_stars=n_stars,
            v_sys=v_sys,
            error_range_kms=error_range,
            seed=seed,
            method=method,
            epochs_mjd=epochs_mjd,
            repeat_fraction=repeat_fraction,
            binary_fraction=binary_fraction,
            n_foreground=n_foreground,
            anisotropy=anisotropy,
            metallicity=metallicity,
            flattening=flattening,
        )
    except InputError as exc:  # the library's spelling of the option -> the command's
        text = str(exc).replace("method='gaussian'", "--method gaussian")
        raise InputError(text.replace("--mock-flattening", "--flattening")) from None
    truth = truth_record(mock, spec, values)
    truth_path = out.with_suffix(out.suffix + ".truth.json")
    _write_table(mock.table, out, fmt, truth)
    try:
        write_json(truth_path, truth)
    except BaseException:  # never a catalogue without its truth
        out.unlink(missing_ok=True)
        raise
    return out, truth_path
