"""Rank statistics of simulation-based calibration (SBC) and interval coverage.

Simulation-based calibration (Talts, Betancourt, Simpson, Vehtari & Gelman 2018, arXiv:1804.06788,
Algorithm 1): draw a truth from the prior, simulate data from it, fit, and count the posterior draws
below the truth. When the inference is calibrated that rank is uniform on {0, ..., L} for L
(independent) posterior draws, whatever the model; a shifted posterior tilts the rank histogram, an
over-confident one makes it U-shaped, an under-confident one makes it hump-shaped.

Posterior draws of MCMC are autocorrelated, which also bends the histogram: thin them to about the
effective sample size first (Talts et al. 2018, sect. 5.1), :func:`thin_draws`.

Uniformity is judged by the chi-square test of the binned histogram against equal counts (bins of
equal width in rank, so (L + 1) must be a multiple of the number of bins, as Talts et al. advise)
and by the Kolmogorov-Smirnov test of the randomised normalised ranks
u = (rank + U(0, 1)) / (L + 1), exactly uniform on (0, 1) under calibration (the randomised
probability integral transform of a discrete variable, common practice). The statistics are
computed here; their null distributions (chi-square with B - 1 degrees of freedom, the exact
one-sample KS distribution) come from scipy.
"""

import math

import numpy as np

__all__ = [
    "sbc_ranks",
    "thin_draws",
    "rank_histogram",
    "chi_square_uniformity",
    "ks_uniformity",
    "rank_bias",
    "interval_coverage",
    "exceedance_rate",
]


def sbc_ranks(truths, draws):
    """Rank of each truth among its posterior draws: the number of draws below it.

    ``truths``: shape (N,); ``draws``: shape (N, L). Returns integers in 0..L (Talts et al. 2018,
    Algorithm 1: r = sum_l 1[theta_l < theta_true]). A draw equal to the truth counts half, as a
    fair coin would split the tie (a tie has probability zero for continuous parameters).
    """
    truths = np.asarray(truths, dtype=float)
    draws = np.asarray(draws, dtype=float)
    if draws.ndim != 2 or truths.shape != draws.shape[:1]:
        shapes = f"{truths.shape}, {draws.shape}"
        raise ValueError(f"expected truths (N,) and draws (N, L), got {shapes}")
    below = np.sum(draws < truths[:, None], axis=1)
    ties = np.sum(draws == truths[:, None], axis=1)
    return (below + np.floor(ties / 2)).astype(int)


def thin_draws(draws, n_keep):
    """``n_keep`` draws evenly spaced along the last axis (chains flattened first)."""
    draws = np.asarray(draws, dtype=float)
    flat = draws.reshape(draws.shape[0], -1) if draws.ndim > 2 else draws
    n = flat.shape[-1]
    if not 1 <= n_keep <= n:
        raise ValueError(f"n_keep must be between 1 and {n}, got {n_keep}")
    idx = np.floor(np.arange(n_keep) * (n / n_keep)).astype(int)
    return flat[..., idx]


def rank_histogram(ranks, n_draws, n_bins):
    """Counts of ``ranks`` (0..n_draws) in ``n_bins`` bins of equal width in rank."""
    ranks = np.asarray(ranks)
    if (n_draws + 1) % n_bins:
        raise ValueError(f"n_draws + 1 = {n_draws + 1} is not a multiple of n_bins = {n_bins}")
    if ranks.size and (ranks.min() < 0 or ranks.max() > n_draws):
        raise ValueError(f"ranks must lie in 0..{n_draws}")
    width = (n_draws + 1) // n_bins
    return np.bincount(ranks // width, minlength=n_bins)


def chi_square_uniformity(ranks, n_draws, n_bins):
    """(statistic, p-value) of Pearson's chi-square test of the rank histogram against equal
    counts, with n_bins - 1 degrees of freedom (valid for 5 or more expected per bin, common
    practice)."""
    from scipy.stats import chi2

    counts = rank_histogram(ranks, n_draws, n_bins).astype(float)
    expected = counts.sum() / n_bins
    stat = float(np.sum((counts - expected) ** 2) / expected)
    return stat, float(chi2.sf(stat, n_bins - 1))


def ks_uniformity(ranks, n_draws, seed=0):
    """(statistic, p-value) of the one-sample Kolmogorov-Smirnov test of the randomised
    normalised ranks (rank + U(0, 1)) / (n_draws + 1) against U(0, 1) (exact two-sided null
    distribution, scipy.stats.kstwo). ``seed`` fixes the randomisation."""
    from scipy.stats import kstwo

    ranks = np.asarray(ranks, dtype=float)
    u = np.sort((ranks + np.random.default_rng(seed).uniform(size=ranks.size)) / (n_draws + 1))
    n = u.size
    i = np.arange(1, n + 1)
    stat = float(max(np.max(i / n - u), np.max(u - (i - 1) / n)))
    return stat, float(kstwo.sf(stat, n))


def interval_coverage(ranks, n_draws, levels=(0.68, 0.95)):
    """{level: (fraction, expected, standard error)}: how often the truth falls inside the
    central posterior interval of ``level``, judged from its rank among ``n_draws`` draws.

    The interval holds the ranks lo..n_draws - lo (lo = (1 - level) / 2 (L + 1), rounded half
    up), so that under calibration the fraction inside is exactly ``expected`` = (L + 1 - 2 lo) /
    (L + 1), the level up to the draws' granularity (an interval from the draws' own quantiles
    misses more often than ``level`` when they are few); the standard error is the binomial one
    under calibration, sqrt(expected (1 - expected) / N).
    """
    ranks = np.asarray(ranks)
    out = {}
    for level in levels:
        lo = math.floor((1 - level) / 2 * (n_draws + 1) + 0.5)
        inside = (ranks >= lo) & (ranks <= n_draws - lo)
        expected = (n_draws + 1 - 2 * lo) / (n_draws + 1)
        se = math.sqrt(expected * (1 - expected) / ranks.size)
        out[level] = (float(inside.mean()), expected, se)
    return out


def rank_bias(ranks, n_draws):
    """(mean of rank / L - 1/2, its standard error under calibration): the shift of the posterior
    against the truths in posterior quantile, positive when truths rank high (the posterior
    sits low). Under calibration the rank is uniform on {0, ..., L}, of variance
    ((L + 1)^2 - 1) / 12 (the discrete uniform distribution, common practice)."""
    ranks = np.asarray(ranks, dtype=float)
    se = math.sqrt(((n_draws + 1) ** 2 - 1) / 12.0) / n_draws / math.sqrt(ranks.size)
    return float(ranks.mean() / n_draws - 0.5), se


def exceedance_rate(values, thresholds=(1.0, 3.0), confidence=0.95):
    """{threshold: (fraction of ``values`` above it, lower, upper)}: for the false-dark-matter
    rate, ``values`` are ln B of fits to mocks without a halo. The bounds are the Clopper-Pearson
    (1934) exact binomial interval at ``confidence``."""
    from scipy.stats import beta

    values = np.asarray(values, dtype=float)
    n, a = values.size, 1 - confidence
    out = {}
    for t in thresholds:
        k = int(np.sum(values > t))
        lo = 0.0 if k == 0 else float(beta.ppf(a / 2, k, n - k + 1))
        hi = 1.0 if k == n else float(beta.ppf(1 - a / 2, k + 1, n - k))
        out[t] = (k / n, lo, hi)
    return out
