"""Simulation-based calibration (Talts et al. 2018, arXiv:1804.06788) of the fit pipeline: truths
drawn from the full prior, mocks simulated from them and written as a batch manifest.

The prior is the fit's own: the nuisances (v_sys, distance, half-light radius, stellar mass) and
the spec's parameters are drawn by running the sample sites of the model's own
:func:`~halo.inference.model.sample_nuisances` and
:func:`~halo.inference.model.sample_spec_parameters` under numpyro's ``Predictive`` (no
data), the binary fraction uniform on the spec's ``[binaries] fraction`` range (the model's
``f_binary`` prior). So the draws follow the priors the sampler uses, not a second
implementation of them.

Each truth becomes a mock (:func:`halo.mock.files.mock_from_spec`, i.e.
:func:`halo.mock.catalogue.make_mock`): the satellite at the drawn distance, its major-axis
half-light radius r_half (d / d0) (so the angular size the fit reads scales back to the drawn
r_half_pc at the file's distance d0, as the model's ``r_half_pc`` site is defined), the drawn
stellar mass at that distance (``m_star``), the drawn halo and anisotropy, members with binaries of
the drawn fraction (orbits from the spec's binary population), and a foreground fraction uniform
in [0, ``foreground_max``] of the ``n_stars`` stars as field stars (the mock generator's default
two-component field; the fit's foreground model is one Gaussian, so this part of the simulation is
not the model's own: common practice for a nuisance that is not ranked).

The v_sys prior must not depend on the data for the ranks to mean anything: a satellite file
without ``v_sys_kms`` and ``v_sys_err_kms`` is given the ``v_sys_prior`` (mean, sigma) [km/s],
written into the calibration's own copy of the file (DIR/mocks/satellite.toml) that every fit
reads.
"""

import json
import math
from pathlib import Path

import numpy as np

from halo.core.errors import InputError
from halo.core.fileio import write_ecsv, write_json, write_text
from halo.inputs.satellite import parse_satellite, read_satellite
from halo.inputs.spec import load_spec
from halo.inputs.spec_anisotropy import with_anisotropy
from halo.mock.files import mock_from_spec, truth_record

__all__ = [
    "SbcDesign",
    "prior_draws",
    "sampled_sites",
    "calibration_satellite",
    "satellite_toml",
    "write_mocks",
    "MOCK_FOLDER",
    "MANIFEST_NAME",
]

MOCK_FOLDER, MANIFEST_NAME = "mocks", "manifest.toml"
#: each measurement's error, uniform in this range [km/s] (the mock generator's default)
ERROR_RANGE_KMS = (1.0, 3.0)
#: first epoch [MJD] and spacing of further epochs [d] of multi-epoch mocks (a year apart)
FIRST_MJD, EPOCH_STEP_DAYS = 60000.0, 365.25


class SbcDesign:
    """What a calibration simulates: ``spec`` (name or path), ``n_mocks``, ``n_stars`` (members
    and field stars), ``seed``, ``binaries`` (members with binaries of the drawn fraction),
    ``foreground_max`` (largest field-star fraction; 0: none), ``epochs`` (1 or more, a year
    apart), ``anisotropy`` (a kind replacing the spec's, as `--anisotropy`).

    Robustness runs simulate mocks the fitted model does not assume: ``mock_periods`` (mean,
    sigma) of log10 of the binaries' periods [day] in the mocks only (the fits keep the spec's
    population), ``mock_field`` the field's velocity components ((offset from v_sys, sigma,
    weight) [km/s]; default the generator's two-component field), ``mock_flattening`` the
    intrinsic axis ratio q of an oblate tracer seen at the inclination that gives the satellite's
    ellipticity (:mod:`halo.mock.flattened`; the fits stay spherical)."""

    def __init__(
        self,
        spec,
        n_mocks,
        n_stars,
        *,
        seed=0,
        binaries=True,
        foreground_max=0.2,
        epochs=1,
        anisotropy=None,
        mock_periods=None,
        mock_field=None,
        mock_flattening=None,
    ):
        if n_mocks < 1:
            raise InputError(f"--mocks: expected a positive number, got {n_mocks!r}")
        if n_stars < 5:
            raise InputError(f"--stars: expected at least 5 stars per mock, got {n_stars!r}")
        if not 0.0 <= foreground_max < 1.0:
            raise InputError(f"--foreground-max: expected 0 <= value < 1, got {foreground_max!r}")
        if epochs < 1:
            raise InputError(f"--epochs: expected a positive number, got {epochs!r}")
        self.spec_name, self.n_mocks, self.n_stars, self.seed = spec, n_mocks, n_stars, seed
        self.binaries, self.foreground_max, self.epochs = binaries, foreground_max, epochs
        self.anisotropy = anisotropy
        self.spec = with_anisotropy(load_spec(spec), anisotropy)
        self.mock_periods, self.mock_field = _checked_periods(mock_periods), mock_field
        if mock_flattening is not None and not 0.0 < mock_flattening <= 1.0:
            raise InputError(
                f"--mock-flattening: expected an intrinsic axis ratio in (0, 1], got "
                f"{mock_flattening!r}"
            )
        self.mock_flattening = mock_flattening
        pop = self.spec.binary_population()
        if self.mock_periods is not None:
            mean, sigma = self.mock_periods
            pop = pop.clone(log_period_mean=mean, log_period_sigma=sigma)
        self.mock_population = pop

    def as_dict(self):
        return {
            "spec": self.spec.name,
            "spec_source": self.spec.source,
            "n_mocks": self.n_mocks,
            "n_stars": self.n_stars,
            "seed": self.seed,
            "binaries": self.binaries,
            "foreground_max": self.foreground_max,
            "epochs": self.epochs,
            "anisotropy": self.anisotropy,
            "error_range_kms": list(ERROR_RANGE_KMS),
            "mock_binary_periods": None if self.mock_periods is None else list(self.mock_periods),
            "mock_field": None if self.mock_field is None else [list(c) for c in self.mock_field],
            "mock_flattening": self.mock_flattening,
            "model_violations": self.violations(),
        }

    def violations(self):
        """What the mocks have that the fitted model does not assume (plain words)."""
        out = ["field stars from the mock generator's field, not the fit's one Gaussian"]
        if self.mock_field is not None:
            out[0] = f"field stars from the components {[list(c) for c in self.mock_field]}"
        if self.mock_periods is not None:
            out.append(
                "binary periods log10 P/d ~ N({:g}, {:g}) in the mocks, the spec's in the "
                "fits".format(*self.mock_periods)
            )
        if self.mock_flattening is not None:
            out.append(
                f"an oblate tracer of intrinsic axis ratio {self.mock_flattening:g} (inclined to "
                "the satellite's ellipticity) in the mocks, a spherical one in the fits"
            )
        return out


def _checked_periods(periods):
    if periods is None:
        return None
    mean, sigma = (float(x) for x in periods)
    if not (-1.0 < mean < 10.0 and 0.0 < sigma < 5.0):
        raise InputError(
            f"--mock-binary-periods: expected MEAN,SIGMA of log10 P [day] with -1 < MEAN < 10 "
            f"and 0 < SIGMA < 5, got {mean:g},{sigma:g}"
        )
    return mean, sigma


def _prior(spec, satellite, binaries):
    """The fit's prior as a numpyro model without data (see the module notes)."""
    import jax.numpy as jnp
    import numpyro
    import numpyro.distributions as dist

    from halo.inference.model import sample_nuisances, sample_spec_parameters

    def prior():
        sample_nuisances(satellite, jnp.asarray(satellite.v_sys_kms))
        sample_spec_parameters(spec, satellite)
        if binaries:
            numpyro.sample("f_binary", dist.Uniform(*spec.binary_fraction_range))

    return prior


def _check_v_sys_prior(satellite):
    if not (satellite.v_sys_err_kms or 0) > 0 or satellite.v_sys_kms is None:
        raise InputError(
            f"{satellite.source}: key 'v_sys_err_kms': calibration needs a v_sys prior that "
            "does not depend on the data (give v_sys_kms and v_sys_err_kms > 0)"
        )


def prior_draws(spec, satellite, n, seed=0, binaries=True):
    """{site: array (n,)} of the fit's prior (see the module notes); ``satellite`` must carry a
    v_sys prior (``v_sys_err_kms`` > 0), else InputError."""
    import jax
    from numpyro.infer import Predictive

    _check_v_sys_prior(satellite)
    prior = _prior(spec, satellite, binaries)
    out = Predictive(prior, num_samples=int(n))(jax.random.PRNGKey(int(seed)))
    return {k: np.asarray(v, dtype=float) for k, v in out.items()}


def sampled_sites(spec, satellite, binaries=True):
    """The names of the prior's sample sites (the parameters the sampler moves, e.g.
    ``log10_m200``, not their deterministic transforms such as ``m200``), in model order."""
    import jax
    from numpyro import handlers

    _check_v_sys_prior(satellite)
    prior = _prior(spec, satellite, binaries)
    tr = handlers.trace(handlers.seed(prior, jax.random.PRNGKey(0))).get_trace()
    return [k for k, v in tr.items() if v["type"] == "sample"]


def _toml_value(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    return json.dumps(v)


def satellite_toml(d):
    """A satellite file's TOML text of its keys ``d`` (``Satellite.as_dict()``)."""
    d = dict(d)
    fg = d.pop("foreground", None)
    lines = [f"{k} = {_toml_value(v)}" for k, v in d.items()]
    for comp in fg or ():
        lines += ["", "[[foreground]]"] + [f"{k} = {_toml_value(v)}" for k, v in comp.items()]
    return "\n".join(lines) + "\n"


def calibration_satellite(path, v_sys_prior=(0.0, 10.0)):
    """(Satellite, TOML text) of the calibration's copy of satellite file ``path``: the file's
    keys, plus ``v_sys_kms``/``v_sys_err_kms`` = ``v_sys_prior`` when it has no v_sys prior."""
    sat = read_satellite(path)
    d = sat.as_dict()
    if d.get("v_sys_kms") is None or not (d.get("v_sys_err_kms") or 0) > 0:
        mean, sigma = (float(x) for x in v_sys_prior)
        if not (math.isfinite(mean) and math.isfinite(sigma) and sigma > 0):
            raise InputError(
                f"--v-sys-prior: expected MEAN,SIGMA with SIGMA > 0 [km/s], got {v_sys_prior!r}"
            )
        d["v_sys_kms"], d["v_sys_err_kms"] = mean, sigma
    text = satellite_toml(d)
    import tomllib

    return parse_satellite(tomllib.loads(text), source=str(path)), text


def _draw(draws, i):
    return {k: float(v[i]) for k, v in draws.items()}


def _truth_satellite(sat, draw):
    """The satellite a mock is drawn from: at the drawn distance, with the drawn angular size."""
    d = sat.as_dict()
    scale = draw["distance"] / sat.distance_kpc
    d["distance_kpc"] = draw["distance"]
    d["r_half_pc"] = draw["r_half_pc"] * scale
    d["stellar_mass_msun"] = draw["m_star"]
    return parse_satellite(d, source=f"{sat.source} (truth)")


def _mock_values(spec, draw):
    """The parameter values of ``spec``'s halo and anisotropy in a prior draw."""
    values = {k: draw[k] for k in spec.parameters if k in draw}
    for k, p in spec.parameters.items():
        if p["prior"] == "fixed":
            values[k] = float(p["value"])
    values["stellar_mass"] = draw["m_star"]
    return values


def _one_mock(design, sat, draw, rng, index):
    """(mock, values, truth extras) of prior draw ``draw``."""
    n_fg = int(round(rng.uniform(0.0, design.foreground_max) * design.n_stars))
    n_fg = min(n_fg, design.n_stars - 2)
    f_b = draw.get("f_binary", 0.0) if design.binaries else 0.0
    epochs = None
    if design.epochs > 1:
        epochs = [FIRST_MJD + EPOCH_STEP_DAYS * k for k in range(design.epochs)]
    values = _mock_values(design.spec, draw)
    mock, _, values = mock_from_spec(
        _truth_satellite(sat, draw),
        design.spec_name,
        values,
        anisotropy=design.anisotropy,
        n_stars=design.n_stars - n_fg,
        v_sys=draw["v_sys"],
        error_range_kms=ERROR_RANGE_KMS,
        seed=int(rng.integers(2**31)),
        epochs_mjd=epochs,
        binary_fraction=f_b,
        binary_population=design.mock_population,
        n_foreground=n_fg,
        foreground_components=design.mock_field,
        flattening=design.mock_flattening,
    )
    extras = {
        "prior_draw": draw,
        "n_foreground": n_fg,
        "foreground_fraction": n_fg / design.n_stars,
        "index": index,
    }
    return mock, values, extras


def _entry_toml(name, models, seed):
    listed = ", ".join(json.dumps(m) for m in models)
    return (
        f'[[entry]]\nname = "{name}"\ncatalogue = "{name}.ecsv"\nsatellite = '
        f'"satellite.toml"\nmodels = [{listed}]\nseed = {seed}\n\n'
    )


def mock_name(i):
    return f"mock-{i:04d}"


def write_mocks(
    design, satellite_path, out_dir, fit_models, *, v_sys_prior=(0.0, 10.0), on_mock=None
):
    """Draw the truths, write DIR/mocks/<name>.ecsv (truth in its header), <name>.truth.json,
    satellite.toml and manifest.toml (one entry per mock fitting ``fit_models``, seeded by its
    index). Returns (manifest path, satellite, [truth record per mock])."""
    folder = Path(out_dir) / MOCK_FOLDER
    sat, text = calibration_satellite(satellite_path, v_sys_prior)
    write_text(folder / "satellite.toml", text)
    draws = prior_draws(design.spec, sat, design.n_mocks, design.seed, design.binaries)
    rng = np.random.default_rng(design.seed)
    truths, tables = [], []
    for i in range(design.n_mocks):
        name = mock_name(i)
        mock, values, extras = _one_mock(design, sat, _draw(draws, i), rng, i)
        truth = {**truth_record(mock, design.spec, values), **extras, "name": name}
        table = mock.table
        table.meta.clear()
        table.meta["truth"] = truth
        write_ecsv(folder / f"{name}.ecsv", table)
        write_json(folder / f"{name}.truth.json", truth)
        truths.append(truth)
        tables.append(_entry_toml(name, fit_models, design.seed + i))
        if on_mock is not None:
            on_mock(i)
    manifest = folder / MANIFEST_NAME
    write_text(manifest, "".join(tables))
    return manifest, sat, truths
