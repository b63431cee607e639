"""Evidence estimators against closed forms and against each other.

- Conjugate normal model: y_i ~ N(mu, s^2), mu ~ N(m0, tau^2) has
  Z = N(y | m0 1, s^2 I + tau^2 1 1^T)
  (e.g. Bishop 2006, Pattern Recognition and Machine Learning, eq. 2.115).
- Bounded prior: mu ~ Uniform(a, b) gives Z = C sqrt(2 pi s^2 / n) [Phi(z_b) - Phi(z_a)] / (b - a)
  (direct integration of the Gaussian likelihood, common practice), with an extra parameter that
  the data do not touch (its prior integrates to one).
"""

import jax
import numpy as np
import numpyro
import numpyro.distributions as dist
import pytest
from scipy import stats

from halo.inference.evidence import log_evidence
from halo.inference.sampling import run_nuts

Y = np.random.default_rng(3).normal(1.3, 2.0, size=25)
S = 2.0


def conjugate_model():
    mu = numpyro.sample("mu", dist.Normal(0.5, 3.0))
    numpyro.sample("y", dist.Normal(mu, S), obs=Y)


def bounded_model():
    mu = numpyro.sample("mu", dist.Uniform(-1.0, 4.0))
    numpyro.sample("nuisance", dist.LogNormal(0.0, 1.0))
    numpyro.sample("y", dist.Normal(mu, S), obs=Y)


def _fit(model, sites):
    mcmc = run_nuts(model, chains=2, warmup=500, draws=2000, seed=1, progress=False)
    return log_evidence(model, mcmc.get_samples(), sites, chains=2, seed=2)


def test_conjugate_normal_evidence():
    n = len(Y)
    cov = S**2 * np.eye(n) + 3.0**2 * np.ones((n, n))
    truth = stats.multivariate_normal(mean=np.full(n, 0.5), cov=cov).logpdf(Y)
    res = _fit(conjugate_model, ["mu"])
    assert abs(res.log_z - truth) < max(4 * res.log_z_err, 0.02)
    assert 0 < res.log_z_err < 0.05


def test_bounded_prior_evidence_with_untouched_parameter():
    n, ybar = len(Y), Y.mean()
    log_c = -0.5 * n * np.log(2 * np.pi * S**2) - np.sum((Y - ybar) ** 2) / (2 * S**2)
    z = np.sqrt(n) / S
    mass = stats.norm.cdf((4.0 - ybar) * z) - stats.norm.cdf((-1.0 - ybar) * z)
    truth = log_c + 0.5 * np.log(2 * np.pi * S**2 / n) + np.log(mass) - np.log(5.0)
    res = _fit(bounded_model, ["mu", "nuisance"])
    assert abs(res.log_z - truth) < max(4 * res.log_z_err, 0.03)


def test_seeded_reproducible():
    mcmc = run_nuts(conjugate_model, chains=1, warmup=200, draws=400, seed=5, progress=False)
    a = log_evidence(conjugate_model, mcmc.get_samples(), ["mu"], chains=1, seed=2)
    b = log_evidence(conjugate_model, mcmc.get_samples(), ["mu"], chains=1, seed=2)
    assert a.log_z == b.log_z
    assert jax.numpy.isfinite(a.log_z)


def test_bridge_agrees_with_nested_sampling_on_a_jeans_model():
    # two independent estimators of the same evidence: bridge sampling from NUTS draws (Meng &
    # Wong 1996) and nested sampling (dynesty; Skilling 2006, Bayesian Analysis 1, 833)
    pytest.importorskip("dynesty")
    from halo.inference.evidence import nested_sampling_evidence
    from halo.inference.model import make_fit_data, make_model
    from halo.inputs.catalogue import stars_from_table
    from halo.inputs.satellite import parse_satellite
    from halo.inputs.spec import load_spec
    from halo.mock.catalogue import make_mock
    from halo.pipeline.model_run import latent_sites

    sat = parse_satellite(
        {
            "name": "x",
            "ra_deg": 10.0,
            "dec_deg": 5.0,
            "distance_kpc": 30.0,
            "distance_err_kpc": 1.5,
            "r_half_pc": 20.0,
            "r_half_err_pc": 2.0,
            "stellar_mass_msun": 3e5,
            "stellar_mass_err_msun": 6e4,
        }
    )
    mock = make_mock(sat, None, n_stars=40, v_sys=5.0, error_range_kms=(0.5, 1.0), seed=4)
    stars = stars_from_table(mock.table, sat)
    model = make_model(
        load_spec("stars-only"), sat, make_fit_data(stars.v, stars.v_err, stars.radius_deg)
    )
    sites = latent_sites(model)
    mcmc = run_nuts(model, chains=2, warmup=500, draws=1500, seed=1, progress=False)
    bridge = log_evidence(model, mcmc.get_samples(), sites, chains=2, seed=2)
    log_z, err = nested_sampling_evidence(model, sites, nlive=300, seed=3)
    tol = 3 * np.hypot(bridge.log_z_err, err) + 0.05
    assert abs(bridge.log_z - log_z) < tol, (bridge, log_z, err)
