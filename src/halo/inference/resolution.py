"""Is a (constant) line-of-sight dispersion resolved by the data? A profile of the member
likelihood of :mod:`halo.inference.likelihood` in a constant sigma_los, at a plugged-in systemic
velocity, evaluated with the same JAX per-star terms as the fit."""

import jax
import jax.numpy as jnp
import numpy as np

from halo.inference.likelihood import member_log_terms, single_log_term

__all__ = ["dispersion_resolution"]


def _binary_mixture(binaries, epochs, n):
    """(ln weights, scales, locations) (n, K) of each star's binary mean-offset mixture."""
    if epochs is None:
        log_w = np.tile(np.log(np.maximum(binaries.weights, 1e-300)), (n, 1))
        scales = np.tile(np.asarray(binaries.scales, dtype=float), (n, 1))
        return log_w, scales, np.zeros_like(scales)
    return tuple(np.asarray(a) for a in (epochs.log_w, epochs.scale, epochs.loc))


def _profile(v, e2, v_sys, q, grid, binaries, epochs, fractions):
    """ln L(sigma) on ``grid``: members weighted by ``q``, the binary fraction marginalised over
    the grid ``fractions`` (uniform prior)."""
    from scipy.special import logsumexp

    n = len(v)
    log_c0 = jnp.zeros(n) if epochs is None else jnp.asarray(epochs.log_c0)
    log_c1 = jnp.zeros(n) if epochs is None else jnp.asarray(epochs.log_c1)
    vj, e2j = jnp.asarray(v), jnp.asarray(e2)
    ll = np.empty(len(grid))
    if binaries is None:
        single = jax.jit(lambda s: single_log_term(vj, s**2 + e2j, v_sys, log_c0))
        for k, s in enumerate(grid):
            ll[k] = np.sum(q * np.asarray(single(s)))
        return ll
    log_w, scales, loc = (jnp.asarray(a) for a in _binary_mixture(binaries, epochs, n))

    @jax.jit
    def terms(s):
        return member_log_terms(vj, s**2 + e2j, v_sys, log_c0, log_c1, log_w, scales, loc)

    for k, s in enumerate(grid):
        single, binary = (np.asarray(t) for t in terms(s))
        per = np.logaddexp(
            np.log1p(-fractions)[:, None] + single[None, :],
            np.log(fractions)[:, None] + binary[None, :],
        )
        ll[k] = logsumexp(per @ q) - np.log(len(fractions))
    return ll


def _summary(grid, ll):
    """Likelihood-ratio test of sigma = 0 and the posterior quantiles of sigma on the grid."""
    two_dl = float(2.0 * (ll.max() - ll[0]))
    post = np.exp(ll - ll.max())
    cdf = np.concatenate([[0.0], np.cumsum(0.5 * (post[1:] + post[:-1]) * np.diff(grid))])
    cdf /= cdf[-1]

    def at(p):
        return float(np.interp(p, cdf, grid))

    return {
        "resolved": bool(two_dl >= 4.0),
        "two_delta_ln_l": two_dl,
        "sigma_hat_kms": float(grid[np.argmax(ll)]),
        "sigma_median_kms": at(0.5),
        "sigma_p16_kms": at(0.16),
        "sigma_p84_kms": at(0.84),
        "sigma_upper95_kms": at(0.95),
        "method": "constant sigma_los on a grid at the posterior median v_sys, binary fraction "
        "marginalised, members weighted by their membership probability",
    }


def dispersion_resolution(
    v,
    v_err,
    v_sys,
    weights=None,
    binaries=None,
    epochs=None,
    fraction_range=(0.0, 1.0),
    n_grid=801,
    n_fraction=101,
):
    """Is a (constant) line-of-sight dispersion resolved by the data?

    The member likelihood of the module notes with sigma_los constant, on a grid of sigma, at a
    plugged-in systemic velocity (a fit's posterior median), each star's log-likelihood weighted
    by its membership probability ``weights``; with ``binaries`` the binary fraction is
    marginalised over its uniform prior on ``fraction_range`` (``n_fraction`` grid points).

    Returns a dict: ``resolved`` (2 [ln L(sigma_hat) - ln L(0)] >= 4, i.e. sigma = 0 excluded at
    about 2 sigma by the likelihood-ratio test, Wilks 1938 [common practice]), ``two_delta_ln_l``,
    and from the posterior with a uniform prior in sigma on the grid: ``sigma_median_kms``,
    ``sigma_p16_kms``, ``sigma_p84_kms``, ``sigma_upper95_kms`` (the one-sided 95% upper limit).
    """
    v = np.asarray(v, dtype=float)
    e2 = np.asarray(v_err, dtype=float) ** 2
    q = np.ones(len(v)) if weights is None else np.asarray(weights, dtype=float)
    mean = np.sum(q * v) / np.sum(q)
    spread = np.sqrt(np.sum(q * (v - mean) ** 2) / np.sum(q))
    grid = np.linspace(0.0, max(5.0, 3.0 * spread), n_grid)
    lo, hi = fraction_range
    fractions = lo + (hi - lo) * (np.arange(n_fraction) + 0.5) / n_fraction
    ll = _profile(v, e2, float(v_sys), q, grid, binaries, epochs, fractions)
    return _summary(grid, ll)
