"""The per-star likelihood pieces (halo.inference.likelihood) against closed forms and brute
force."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from astropy.table import Table
from scipy import integrate, stats

from halo.core.errors import InputError
from halo.inference.likelihood import (
    PerStarLikelihood,
    epoch_terms,
    foreground_log_density,
    gaussian_mixture_em,
    member_log_terms,
    spatial_log_prior,
)
from halo.inference.model import Foreground, make_fit_data, make_model
from halo.inference.resolution import dispersion_resolution
from halo.inputs.catalogue import stars_from_table
from halo.inputs.satellite import parse_satellite
from halo.inputs.spec import load_spec, parse_spec
from halo.physics.binaries import BinaryPopulation, load_mixture, los_velocity, sample_orbits
from halo.physics.light import Plummer
from halo.pipeline.settings import foreground_decision

jax.config.update("jax_enable_x64", True)

SAT = {
    "name": "x",
    "ra_deg": 10.0,
    "dec_deg": 0.0,
    "distance_kpc": 30.0,
    "r_half_pc": 30.0,
    "stellar_mass_msun": 1e3,
}


def _stars(rows, fill=True):
    """StarData from (id, v, err, mjd) rows, plus three single-epoch filler stars at the end
    (the catalogue reader needs at least three stars)."""
    if fill:
        rows = list(rows) + [(f"fill{k}", 0.0, 1.0, 0.0) for k in range(3)]
    ids, v, err, mjd = zip(*rows, strict=True)
    t = Table(
        {
            "id": list(ids),
            "ra": [10.0 + 0.001 * (hash(i) % 7) for i in ids],
            "dec": [0.0] * len(ids),
            "vlos": list(v),
            "vlos_err": list(err),
            "mjd": list(mjd),
        }
    )
    return stars_from_table(t, parse_satellite(SAT), source="test")


def test_single_star_identity_matches_multivariate_normal():
    """C N(vbar | mu, sigma^2 + 1/W) equals the joint density of the epochs with covariance
    sigma^2 11^T + diag(err^2) (Gaussian integral identity; checked with scipy)."""
    rows = [("a", 3.0, 0.5, 0.0), ("a", 4.1, 0.8, 100.0), ("a", 2.2, 1.2, 400.0)]
    s = _stars(rows)
    e = epoch_terms(s, load_mixture())
    sig, mu = 2.5, 1.0
    err = np.array([0.5, 0.8, 1.2])
    cov = sig**2 + np.diag(err**2)
    ref = stats.multivariate_normal(mean=np.full(3, mu), cov=cov).logpdf([3.0, 4.1, 2.2])
    var = jnp.asarray(sig**2 + s.v_err**2)
    single, _ = member_log_terms(
        jnp.asarray(s.v), var, mu, e.log_c0, e.log_c1, e.log_w, e.scale, e.loc
    )
    assert float(single[0]) == pytest.approx(ref, abs=1e-12)


def test_single_epoch_terms_are_the_population_mixture():
    s = _stars([("a", 1.0, 1.0, 0.0), ("b", 2.0, 1.0, 0.0)])
    mix = load_mixture()
    e = epoch_terms(s, mix)
    assert np.all(e.log_c0 == 0) and np.all(e.log_c1 == 0)
    np.testing.assert_allclose(np.exp(e.log_w), np.tile(mix.weights, (5, 1)), atol=1e-299)
    np.testing.assert_array_equal(e.scale, np.tile(mix.scales, (5, 1)))
    assert np.all(e.loc == 0)


@pytest.mark.parametrize("v2", [10.2, 14.0, 25.0])
@pytest.mark.parametrize("sig,mu", [(0.5, 10.0), (3.0, 12.0)])
def test_binary_term_matches_brute_force_orbit_average(v2, sig, mu):
    """L_binary vs a brute-force average over 1e6 independent orbits of the joint density of
    (v - b(t1), v - b(t2)) (explicit bivariate normal). Tolerance 0.05 in ln L: the Monte Carlo
    noise of the two orbit samples (2e5 and 1e6 orbits; the largest difference seen is 0.042,
    for a 4 km/s change at sigma = 0.5 km/s); the mixture compression itself contributes 2e-4
    (measured with a common orbit sample)."""
    err = np.array([0.5, 0.7])
    v = np.array([10.0, v2])
    s = _stars([("a", v[0], err[0], 0.0), ("a", v[1], err[1], 365.0)])
    mix = load_mixture()
    e = epoch_terms(s, mix, n_orbits=200_000)
    var = jnp.asarray(sig**2 + s.v_err**2)
    _, binary = member_log_terms(
        jnp.asarray(s.v), var, mu, e.log_c0, e.log_c1, e.log_w, e.scale, e.loc
    )
    orb = sample_orbits(BinaryPopulation(), 1_000_000, np.random.default_rng(5))
    b = los_velocity(orb, np.array([0.0, 365.0])[:, None])  # (2, n)
    r = v[:, None] - b - mu
    cov = sig**2 + np.diag(err**2)
    inv = np.linalg.inv(cov)
    q = np.einsum("in,ij,jn->n", r, inv, r)
    logpdf = -0.5 * q - 0.5 * np.log(np.linalg.det(2 * np.pi * cov))
    ref = np.log(np.mean(np.exp(logpdf - logpdf.max()))) + logpdf.max()
    assert float(binary[0]) == pytest.approx(ref, abs=0.05)


def test_steady_and_variable_stars():
    s = _stars(
        [
            ("a", 10.0, 0.5, 0.0),
            ("a", 10.1, 0.5, 365.0),
            ("b", 10.0, 0.5, 0.0),
            ("b", 18.0, 0.5, 365.0),
        ]
    )
    e = epoch_terms(s, load_mixture())
    assert e.log_c1[0] < e.log_c0[0]  # no change: evidence against binarity
    assert e.log_c1[1] - e.log_c0[1] > 20  # 8 km/s change with 0.7 km/s error: a binary
    assert e.ess[1] > 50


def test_gaussian_mixture_em_recovers_a_known_mixture():
    """Weighted EM on a sample from a known two-Gaussian mixture: CDF within 0.01 (KS)."""
    rng = np.random.default_rng(2)
    k = rng.uniform(size=100_000) < 0.3
    x = np.where(k, rng.normal(-3.0, 0.5, k.size), rng.normal(2.0, 1.5, k.size))
    w, m, s = gaussian_mixture_em(x[None], 4, n_iter=300)
    grid = np.linspace(-6, 8, 300)
    cdf = (w[0] * stats.norm.cdf(grid[:, None], m[0], s[0])).sum(axis=1)
    ref = 0.3 * stats.norm.cdf(grid, -3.0, 0.5) + 0.7 * stats.norm.cdf(grid, 2.0, 1.5)
    assert np.max(np.abs(cdf - ref)) < 0.01


def test_spatial_prior_normalised_and_balanced():
    light = Plummer.from_r_half(0.03)
    r_max = 0.15
    f = integrate.quad(
        lambda R: 2 * np.pi * R * float(light.surface_density(R)) / float(light.enclosed_2d(r_max)),
        0,
        r_max,
        epsabs=0,
        epsrel=1e-11,
    )[0]
    assert f == pytest.approx(1.0, rel=1e-9)
    # where S(R) equals the background density 1 / (pi R_max^2), p = f_member
    from scipy.optimize import brentq

    target = float(light.enclosed_2d(r_max)) / (np.pi * r_max**2)
    rr = brentq(lambda R: float(light.surface_density(R)) - target, 1e-4, r_max)
    lp, ln = spatial_log_prior(light, jnp.array([rr]), r_max, 0.3)
    assert float(np.exp(lp[0])) == pytest.approx(0.3, rel=1e-9)
    assert float(np.exp(lp[0]) + np.exp(ln[0])) == pytest.approx(1.0, rel=1e-12)


def test_foreground_density_matches_scipy():
    v = jnp.array([-50.0, 0.0, 80.0])
    err = jnp.array([1.0, 2.0, 3.0])
    means, sigmas, amps = np.array([0.0, 40.0]), np.array([30.0, 80.0]), np.array([0.7, 0.3])
    got = foreground_log_density(v, err, means, sigmas, np.log(amps))
    ref = np.log(
        sum(
            a * stats.norm.pdf(np.asarray(v), m, np.sqrt(s**2 + np.asarray(err) ** 2))
            for m, s, a in zip(means, sigmas, amps, strict=True)
        )
    )
    np.testing.assert_allclose(np.asarray(got), ref, rtol=1e-12)


def test_per_star_likelihood_passes_values():
    ll = jnp.array([-1.0, -2.5])
    assert np.all(np.asarray(PerStarLikelihood(ll).log_prob(jnp.zeros(2))) == np.asarray(ll))


def test_dispersion_resolution():
    rng = np.random.default_rng(3)
    err = np.full(200, 1.0)
    v = rng.normal(0, np.sqrt(4.0**2 + 1.0), 200)
    r = dispersion_resolution(v, err, 0.0)
    assert r["resolved"] and r["sigma_p16_kms"] < 4.0 < r["sigma_p84_kms"] * 1.05
    v0 = rng.normal(0, 2.0, 30)
    r0 = dispersion_resolution(v0, np.full(30, 2.0), 0.0)
    assert not r0["resolved"]
    assert 0.0 < r0["sigma_upper95_kms"] < 3.0
    # with binaries (fraction marginalised) the dispersion is harder to resolve, never easier
    rb = dispersion_resolution(v, err, 0.0, binaries=load_mixture())
    assert rb["two_delta_ln_l"] <= r["two_delta_ln_l"] and rb["resolved"]


def _model_gradient(binaries, foreground, member_prob=None):
    from numpyro.infer.util import initialize_model

    rng = np.random.default_rng(1)
    n = 40
    s = _stars([(str(i), rng.normal(0, 3), 1.0, 0.0) for i in range(n)], fill=False)
    sat = parse_satellite(SAT)
    mix = load_mixture() if binaries else None
    e = epoch_terms(s, mix) if binaries else None
    data = make_fit_data(
        s.v, s.v_err, np.maximum(s.radius_deg, 1e-4), epochs=e, member_prob=member_prob
    )
    model = make_model(load_spec("nfw"), sat, data, binaries=mix, foreground=foreground)
    info = initialize_model(jax.random.PRNGKey(0), model)
    params = info.param_info.z
    pe = info.potential_fn
    g = jax.grad(pe)(params)
    leaves = jax.tree_util.tree_leaves(g)
    assert all(np.all(np.isfinite(np.asarray(x))) for x in leaves)
    # finite differences along v_sys (central, step 1e-5)
    h = 1e-5
    up = dict(params, v_sys=params["v_sys"] + h)
    dn = dict(params, v_sys=params["v_sys"] - h)
    fd = (pe(up) - pe(dn)) / (2 * h)
    assert float(g["v_sys"]) == pytest.approx(float(fd), rel=1e-5, abs=1e-8)


@pytest.mark.parametrize(
    "binaries,foreground", [(True, None), (False, Foreground()), (True, Foreground())]
)
def test_likelihood_is_differentiable(binaries, foreground):
    _model_gradient(binaries, foreground)


def test_member_prob_prior_model_differentiable():
    _model_gradient(True, Foreground(((0.0, 50.0, 1.0),)), member_prob=np.full(40, 0.8))


def test_foreground_decision():
    rng = np.random.default_rng(4)
    rows = [(str(i), rng.normal(0, 3), 1.0, 0.0) for i in range(50)]
    on, why = foreground_decision(_stars(rows, fill=False))
    assert not on, why
    on, why = foreground_decision(_stars(rows + [("far", 120.0, 1.0, 0.0)], fill=False))
    assert on and "1 star" in why


def test_spec_binaries_table():
    spec = load_spec("nfw")
    assert spec.binary_population() == BinaryPopulation()
    data = {
        "dark_profile": "none",
        "anisotropy": "constant",
        "parameters": {"beta": {"prior": "fixed", "value": 0.0}},
        "binaries": {"periods": "duquennoy91", "m1_msun": 0.9, "fraction": [0.2, 0.8]},
    }
    s = parse_spec(data, "x", "x.toml")
    assert s.binary_population().log_period_mean == 4.8
    assert s.binary_population().m1_msun == 0.9
    assert s.binary_fraction_range == (0.2, 0.8)
    for bad in ({"periods": "other"}, {"fraction": [0.5, 0.2]}, {"colour": 1}, {"e_max": 1.2}):
        with pytest.raises(InputError, match="x.toml"):
            parse_spec({**data, "binaries": bad}, "x", "x.toml")


def test_satellite_foreground_components():
    sat = parse_satellite({**SAT, "foreground": [{"mean_kms": 10, "sigma_kms": 60}]})
    assert sat.foreground == ((10.0, 60.0, 1.0),)
    assert sat.as_dict()["foreground"][0]["sigma_kms"] == 60.0
    for bad in ([{"mean_kms": 1}], [{"mean_kms": 1, "sigma_kms": -1}], "x", []):
        with pytest.raises(InputError, match="foreground"):
            parse_satellite({**SAT, "foreground": bad})
