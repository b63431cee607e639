"""Shared set-up of the fit tests: the test satellites, small catalogues written to disk, tiny
sampler settings and the `halo fit` command lines that use them."""

import json

import numpy as np
from astropy.table import Table

from halo.mock.catalogue import make_mock
from halo.pipeline.fit import FitSettings

# a dwarf galaxy with a magnitude (tests/test_fit.py, tests/test_foreground.py)
DWARF = {
    "name": "Test dwarf",
    "ra_deg": 40.0,
    "dec_deg": 12.0,
    "distance_kpc": 60.0,
    "distance_err_kpc": 3.0,
    "r_half_pc": 50.0,
    "r_half_err_pc": 5.0,
    "ellipticity": 0.2,
    "position_angle_deg": 30.0,
    "stellar_mass_msun": 8000.0,
    "stellar_mass_err_msun": 2000.0,
    "absolute_magnitude_v": -4.5,
    "absolute_magnitude_v_err": 0.2,
}
# a star cluster (no dark matter in its mocks)
CLUSTER = {
    "name": "Test cluster",
    "ra_deg": 200.0,
    "dec_deg": -30.0,
    "distance_kpc": 30.0,
    "distance_err_kpc": 1.5,
    "r_half_pc": 6.0,
    "r_half_err_pc": 0.6,
    "stellar_mass_msun": 2.0e4,
    "stellar_mass_err_msun": 4.0e3,
}
# the satellite file of a small field at (151.25, -23.40) deg, less its name line
_TESTA = """ra_deg = 151.25
dec_deg = -23.40
distance_kpc = 45.0
distance_err_kpc = 2.5
r_half_pc = 40.0
r_half_err_pc = 4.0
ellipticity = 0.3
position_angle_deg = 65.0
stellar_mass_msun = 6000.0
stellar_mass_err_msun = 1800.0
"""
# `halo fit` / `halo refit` options that leave out the binary and foreground terms
NO_EXTRAS = ["--no-binaries", "--no-foreground"]


def write_testa(path, name):
    """Write the satellite file of the small field, named ``name``; returns ``path``."""
    path.write_text(f'name = "{name}"\n' + _TESTA)
    return path


def field_catalogue(path, ids, seed, v_scatter, v_err):
    """ECSV of stars ``ids`` within 0.02 deg of the small field's centre, vlos drawn from
    N(87, v_scatter) and errors v_err [km/s]; returns ``path``."""
    rng = np.random.default_rng(seed)
    t = Table()
    t["id"] = ids
    t["ra"] = 151.25 + rng.uniform(-0.02, 0.02, len(ids))
    t["dec"] = -23.40 + rng.uniform(-0.02, 0.02, len(ids))
    t["vlos"] = rng.normal(87.0, v_scatter, len(ids))
    t["vlos_err"] = np.full(len(ids), v_err)
    t.write(path, format="ascii.ecsv")
    return path


def write_satellite(path, sat):
    """Write a satellite mapping as its TOML file (one ``key = value`` line each); returns path."""
    path.write_text("\n".join(f"{k} = {json.dumps(v)}" for k, v in sat.items()) + "\n")
    return path


def cluster_mock(sat, n_stars, seed):
    """A member-only mock of a dark-matter-free cluster: v_sys 12 km/s, errors 0.8-1.5 km/s."""
    return make_mock(sat, None, n_stars=n_stars, v_sys=12.0, error_range_kms=(0.8, 1.5), seed=seed)


def tiny_settings(warmup, draws, seed, *, chains=2, progress=False, **options):
    """FitSettings of a short test run (2 chains, no progress bar unless asked)."""
    return FitSettings(
        chains=chains, warmup=warmup, draws=draws, seed=seed, progress=progress, **options
    )


def tiny_chains(chains=2, warmup=150, draws=150):
    """The sampler options of a short `halo fit` / `halo refit`."""
    return ["--chains", str(chains), "--warmup", str(warmup), "--draws", str(draws)]


def fit_command(catalogue, satellite, out, *models):
    """`halo fit CATALOGUE SATELLITE --out OUT --model M ...` as an argument list."""
    args = ["fit", str(catalogue), str(satellite), "--out", str(out)]
    for model in models:
        args += ["--model", str(model)]
    return args
