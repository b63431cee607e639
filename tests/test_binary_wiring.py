"""The fit's own log-density of binary members against a brute-force orbit average.

The model is built exactly as `halo fit` builds it (halo.pipeline.likelihoods.Likelihoods, then
halo.inference.model.make_model); the per-star log-likelihood is read from the observed site the
sampler sees, with the binary fraction set to 1 (every member a binary). The reference
(tests/binary_reference.py) averages the exact per-orbit likelihood of each star's epoch vector
(scipy's multivariate normal, scipy's Newton solve of Kepler's equation) over 400,000 orbits of
the same population, drawn with another seed: an independent evaluation of the same integral.
"""

import numpy as np
import pytest
from astropy.table import Table
from binary_reference import log_like_binary, log_like_single, primary_velocities
from numpyro import handlers

from halo.inference.model import make_model
from halo.inputs.catalogue import stars_from_table
from halo.inputs.satellite import parse_satellite
from halo.inputs.spec import load_spec
from halo.physics.binaries import BinaryPopulation, sample_orbits
from halo.pipeline.likelihoods import Likelihoods
from halo.pipeline.settings import FitSettings

SAT = {
    "name": "Wiring test",
    "ra_deg": 80.0,
    "dec_deg": 10.0,
    "distance_kpc": 40.0,
    "distance_err_kpc": 2.0,
    "r_half_pc": 30.0,
    "r_half_err_pc": 3.0,
    "stellar_mass_msun": 3000.0,
    "stellar_mass_err_msun": 900.0,
}
V_SYS = 50.0
MJD0 = 58000.0
ERR = 1.0

#: star id -> (velocity of each epoch - v_sys [km/s], epoch times - MJD0 [day]): 1, 2 and 3
#: epochs, steady and varying, near (1 km/s) and far (8 km/s) from v_sys
STARS = {
    "one-near": ([1.0], [0.0]),
    "one-far": ([8.0], [0.0]),
    "two-steady-near": ([1.0, 1.2], [0.0, 365.0]),
    "two-steady-far": ([8.0, 7.9], [0.0, 365.0]),
    "two-varying-near": ([-2.0, 3.0], [0.0, 30.0]),
    "two-varying-far": ([5.0, 11.0], [0.0, 200.0]),
    "three-steady-far": ([8.0, 8.3, 7.8], [0.0, 100.0, 700.0]),
    "three-varying-near": ([0.0, 4.0, -1.5], [0.0, 10.0, 400.0]),
}


def _table():
    rows = []
    for k, (name, (dv, dt)) in enumerate(STARS.items()):
        ra = SAT["ra_deg"] + 0.002 * (k + 1)
        for v, t in zip(dv, dt, strict=True):
            rows.append((name, ra, SAT["dec_deg"], V_SYS + v, ERR, MJD0 + t))
    # a few steady members so that the catalogue is a plausible one
    for k in range(6):
        rows.append((f"bg{k}", SAT["ra_deg"] - 0.003 * (k + 1), SAT["dec_deg"], V_SYS, ERR, MJD0))
    names = ("id", "ra", "dec", "vlos", "vlos_err", "mjd")
    return Table(rows=rows, names=names)


def _trace(model, params):
    tr = handlers.trace(handlers.seed(handlers.substitute(model, data=params), 0)).get_trace()
    latent = {k for k, site in tr.items() if site["type"] == "sample" and not site["is_observed"]}
    assert latent == set(params), latent ^ set(params)  # every latent site set by hand
    return tr


def _model_terms(n_orbits):
    sat = parse_satellite(SAT)
    stars = stars_from_table(_table(), sat, source="wiring")
    spec = load_spec("nfw")
    settings = FitSettings(progress=False, n_orbits=n_orbits)
    b, data, epochs = Likelihoods(stars, settings, False).get(spec)
    sampled = make_model(spec, sat, data, binaries=b)  # the model the sampler runs
    terms = make_model(spec, sat, data, binaries=b, keep_terms=True)  # its per-star terms
    params = {
        "v_sys": V_SYS,
        "distance": SAT["distance_kpc"],
        "r_half_pc": 30.0,
        "m_star_d0": 3000.0,
        "log10_m200": 9.0,
        "log10_c200": 1.2,
        "beta_sym": 0.0,
        "f_binary": 1.0,
    }
    tr = _trace(sampled, params)
    ll = np.asarray(tr["v"]["fn"].log_prob(tr["v"]["value"]))
    tr = _trace(terms, params)
    single = np.asarray(tr["ll_single"]["value"])
    sigma = np.sqrt(np.asarray(tr["var_member"]["value"]) - np.asarray(data.v_err) ** 2)
    return stars, ll, single, sigma, epochs.ess


@pytest.fixture(scope="module")
def default_terms():
    return _model_terms(FitSettings().n_orbits)


@pytest.fixture(scope="module")
def many_orbit_terms():
    return _model_terms(200_000)


@pytest.fixture(scope="module")
def orbits():
    return sample_orbits(BinaryPopulation(), 400_000, np.random.default_rng(20261203))


def _compare(terms, orbits, name):
    stars, ll, single, sigma, ess = terms
    i = list(stars.id).index(name)
    dv, dt = STARS[name]
    v = V_SYS + np.asarray(dv)
    err = np.full(len(v), ERR)
    ref = log_like_binary(v, err, dt, V_SYS, sigma[i], primary_velocities(orbits, dt))
    # the single-star term is exact (a Gaussian identity: the module notes of
    # halo.inference.likelihood)
    assert single[i] == pytest.approx(log_like_single(v, err, V_SYS, sigma[i]), abs=1e-9)
    return ll[i], ref, ess[i]


STEADY = [k for k in STARS if "varying" not in k]
VARYING = [k for k in STARS if "varying" in k]


@pytest.mark.parametrize("name", STEADY)
def test_steady_binary_member_matches_brute_force(default_terms, orbits, name):
    # product defaults: most orbits are consistent with a steady star (ESS > 10^4 of the fit's
    # 20,000), so the fit's orbit average and mixture compression (2e-3 in ln L, measured against
    # the exact average over the same orbits) leave < 0.03 in ln L
    ll, ref, ess = _compare(default_terms, orbits, name)
    assert ess > 1e4
    assert ll == pytest.approx(ref, abs=0.03), (name, ll, ref)


@pytest.mark.parametrize("name", VARYING)
def test_varying_binary_member_matches_brute_force(default_terms, many_orbit_terms, orbits, name):
    # a star whose velocity changed is explained by few orbits (ESS ~ 10^2 of 20,000), so the
    # fit's Monte Carlo error of ln L_binary is ~0.1-0.2 at the default orbit count: the wiring
    # is checked with 200,000 orbits (error ~0.1 with the reference's own), the default within
    # 5 / sqrt(ESS), the stated error scale of the module notes with a heavy-tail margin
    ll, ref, ess = _compare(many_orbit_terms, orbits, name)
    assert ll == pytest.approx(ref, abs=0.12), (name, ll, ref)
    ll, ref, ess = _compare(default_terms, orbits, name)
    assert ll == pytest.approx(ref, abs=5.0 / np.sqrt(ess)), (name, ll, ref, ess)
