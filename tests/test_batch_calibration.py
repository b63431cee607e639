"""SBC rank statistics (halo.batch.calibration) on cases whose answer is known: a conjugate normal
model with its exact posterior (calibrated: uniform ranks, nominal coverage) and the same posterior
shifted or made too narrow (biased: rejected); the tests' statistics against scipy.stats."""

import numpy as np
import pytest
from scipy import stats

from halo.batch.calibration import (
    chi_square_uniformity,
    exceedance_rate,
    interval_coverage,
    ks_uniformity,
    rank_bias,
    rank_histogram,
    sbc_ranks,
    thin_draws,
)

N_SIMS, N_DRAWS, N_BINS = 2000, 99, 20  # L + 1 = 100 ranks in 20 bins of 5


def _conjugate(shift=0.0, width=1.0, seed=1):
    """theta ~ N(0, 1), y ~ N(theta, 1): posterior N(y / 2, 1 / sqrt(2)) (the conjugate normal
    model, e.g. Gelman et al. 2013, Bayesian Data Analysis, sect. 2.5); ``shift`` [posterior sd]
    and ``width`` (a factor) spoil it. (truths, draws of shape (N_SIMS, N_DRAWS))."""
    rng = np.random.default_rng(seed)
    theta = rng.normal(size=N_SIMS)
    y = rng.normal(theta, 1.0)
    sd = np.sqrt(0.5)
    mean = y / 2 + shift * sd
    draws = rng.normal(mean[:, None], width * sd, size=(N_SIMS, N_DRAWS))
    return theta, draws


def test_ranks_count_the_draws_below_the_truth():
    # Talts et al. 2018 (arXiv:1804.06788), Algorithm 1: r = #{l : theta_l < theta_true}
    draws = np.array([[0.0, 1.0, 0.2, 0.7], [5.0, 6.0, 7.0, 8.0], [-1.0, -2.0, -3.0, -4.0]])
    assert list(sbc_ranks([0.5, 1.0, 0.0], draws)) == [2, 0, 4]
    with pytest.raises(ValueError):
        sbc_ranks([0.5], draws)
    with pytest.raises(ValueError, match="multiple"):
        rank_histogram([0, 1], 4, 2)
    assert list(rank_histogram([0, 1, 2, 5, 5], 5, 3)) == [2, 1, 2]
    assert thin_draws(np.arange(20.0).reshape(2, 10), 5).tolist() == [
        [0, 2, 4, 6, 8],
        [10, 12, 14, 16, 18],
    ]


def test_a_calibrated_posterior_gives_uniform_ranks_and_nominal_coverage():
    truths, draws = _conjugate()
    ranks = sbc_ranks(truths, draws)
    counts = rank_histogram(ranks, N_DRAWS, N_BINS)
    stat, p = chi_square_uniformity(ranks, N_DRAWS, N_BINS)
    ref = stats.chisquare(counts)  # scipy: Pearson's test against equal expected counts
    assert stat == pytest.approx(ref.statistic, rel=1e-12) and p == pytest.approx(ref.pvalue)
    assert p > 0.01
    d, p_ks = ks_uniformity(ranks, N_DRAWS, seed=3)
    u = (ranks + np.random.default_rng(3).uniform(size=ranks.size)) / (N_DRAWS + 1)
    ref = stats.kstest(u, "uniform", method="exact")  # scipy's one-sample KS test
    assert d == pytest.approx(ref.statistic, rel=1e-12)
    assert p_ks == pytest.approx(ref.pvalue, rel=1e-9)
    assert p_ks > 0.01
    cover = interval_coverage(ranks, N_DRAWS)
    assert cover[0.68][1] == 0.68 and cover[0.95][1] == 0.94  # ranks 16..83 and 3..96 of 0..99
    for level, (frac, expected, se) in cover.items():
        assert abs(frac - expected) < 3 * se, (level, frac, expected, se)
    bias, se = rank_bias(ranks, N_DRAWS)
    # the discrete uniform on {0, ..., L} (scipy.stats.randint) gives the standard error
    assert se == pytest.approx(stats.randint(0, N_DRAWS + 1).std() / N_DRAWS / N_SIMS**0.5)
    assert abs(bias) < 3 * se


@pytest.mark.parametrize(("shift", "width"), [(0.5, 1.0), (0.0, 0.6), (0.0, 1.6)])
def test_a_biased_or_mis_sized_posterior_is_rejected(shift, width):
    truths, draws = _conjugate(shift, width)
    ranks = sbc_ranks(truths, draws)
    assert chi_square_uniformity(ranks, N_DRAWS, N_BINS)[1] < 1e-6
    assert ks_uniformity(ranks, N_DRAWS)[1] < 1e-6
    counts = rank_histogram(ranks, N_DRAWS, N_BINS)
    edges, middle = counts[[0, -1]].mean(), counts[N_BINS // 2 - 1 : N_BINS // 2 + 1].mean()
    if width < 1:  # over-confident: U-shaped histogram, too few truths inside the intervals
        assert edges > 2 * middle
        assert interval_coverage(ranks, N_DRAWS)[0.68][0] < 0.55
    elif width > 1:  # under-confident: hump-shaped, too many inside
        assert middle > 1.5 * edges
        assert interval_coverage(ranks, N_DRAWS)[0.68][0] > 0.8
    else:  # posterior too high: truths rank low
        assert counts[: N_BINS // 2].sum() > 1.5 * counts[N_BINS // 2 :].sum()
        bias, se = rank_bias(ranks, N_DRAWS)
        # the posterior 0.5 sd too high: truths rank low, far beyond the standard error
        assert bias < -0.1 and bias < -10 * se


def test_exceedance_rate_and_its_exact_binomial_interval():
    ln_b = np.concatenate([np.full(188, -2.0), np.full(9, 2.0), np.full(3, 4.0)])
    rates = exceedance_rate(ln_b, thresholds=(1.0, 3.0, 10.0))
    for t, k in ((1.0, 12), (3.0, 3), (10.0, 0)):
        frac, lo, hi = rates[t]
        ci = stats.binomtest(k, 200).proportion_ci(0.95, method="exact")  # Clopper-Pearson 1934
        assert frac == k / 200
        assert (lo, hi) == (pytest.approx(ci.low, abs=1e-12), pytest.approx(ci.high, abs=1e-12))
