"""NUTS runner: progress reporting and the warm start (earlier posterior as mass matrix).

Reference posterior: a correlated bivariate normal written as a ~ N(0, 10^2),
b | a ~ N(a / 2, 0.1^2), so Var a = 100, Cov(a, b) = 50, Var b = 25.01 (Gaussian conditioning,
e.g. Bishop 2006, Pattern Recognition and Machine Learning, eqs. 2.113-2.117).
"""

import numpy as np
import numpyro
import numpyro.distributions as dist

from halo.inference.sampling import run_nuts
from halo.pipeline.warm_start import warm_init

COV = np.array([[100.0, 50.0], [50.0, 25.01]])


def conjugate_model():
    numpyro.sample("mu", dist.Normal(0.5, 3.0))


def correlated_model():
    # the sorted site order (a_second, b_first) is the reverse of the definition order: the
    # warm start must order the mass matrix as numpyro does (sorted names)
    a = numpyro.sample("b_first", dist.Normal(0.0, 10.0))
    numpyro.sample("a_second", dist.Normal(0.5 * a, 0.1))


def test_progress_bar_counts_every_iteration_and_changes_nothing(capsys):
    # the bar is fed every few iterations from inside the compiled chains; it must end at the
    # full count and leave the draws untouched
    quiet = run_nuts(conjugate_model, chains=2, warmup=103, draws=205, seed=5, progress=False)
    loud = run_nuts(conjugate_model, chains=2, warmup=103, draws=205, seed=5, progress=True)
    np.testing.assert_array_equal(quiet.get_samples()["mu"], loud.get_samples()["mu"])
    err = capsys.readouterr().err
    assert "616/616" in err


def test_warm_start_keeps_the_earlier_posterior_as_mass_matrix():
    cold = run_nuts(correlated_model, chains=2, warmup=500, draws=1000, seed=2, progress=False)
    prev = {k: np.asarray(v) for k, v in cold.get_samples().items()}
    init, inv_mass = warm_init(correlated_model, ["b_first", "a_second"], prev, 2, seed=4)
    # sorted site order: a_second, b_first
    ref = COV[::-1, ::-1]
    np.testing.assert_allclose(inv_mass, ref, rtol=0.25)
    assert set(init) == {"a_second", "b_first"} and init["b_first"].shape == (2,)
    warm = run_nuts(
        correlated_model, chains=2, warmup=150, draws=1000, seed=3, progress=False,
        init_params=init, inverse_mass_matrix=inv_mass, adapt_mass_matrix=False,
    )  # fmt: skip
    x = warm.get_samples()
    draws = np.column_stack([x["b_first"], x["a_second"]])
    np.testing.assert_allclose(np.cov(draws, rowvar=False), COV, rtol=0.2)
    assert abs(draws[:, 0].mean()) < 1.5
    # in the whitened space the target is isotropic: a few leapfrog steps per iteration,
    # against many more with the mass matrix in the wrong (unsorted) order
    steps = np.asarray(warm.get_extra_fields()["num_steps"]).mean()
    wrong = run_nuts(
        correlated_model, chains=2, warmup=150, draws=300, seed=3, progress=False,
        init_params=init, inverse_mass_matrix=COV, adapt_mass_matrix=False,
    )  # fmt: skip
    assert steps <= 8 < 3 * steps < np.asarray(wrong.get_extra_fields()["num_steps"]).mean()


def test_chains_on_several_threads_give_the_same_draws(monkeypatch):
    # one group of chains per core runs on its own thread; every chain keeps its key and start,
    # so the draws must not depend on how the chains are grouped (3 chains: groups of 1 and 2)
    from halo.inference.sampling import chain_threads

    runs = {}
    for k in ("1", "2", "3"):
        monkeypatch.setenv("HALO_CHAIN_THREADS", k)
        assert chain_threads(3) == int(k)
        mcmc = run_nuts(correlated_model, chains=3, warmup=50, draws=60, seed=4, progress=True)
        runs[k] = mcmc.get_samples(group_by_chain=True)
    for k in ("2", "3"):
        for name in runs["1"]:
            np.testing.assert_array_equal(runs["1"][name], runs[k][name])
    assert runs["1"]["b_first"].shape == (3, 60)
