"""Mean metallicity and intrinsic [Fe/H] spread of the members: a Gaussian with measurement
errors, field stars handled by a mixture weighted by each star's membership probability.

Model (per star i with a measured [Fe/H] x_i and error e_i, in dex):

    p(x_i) = p_i N(x_i | mu, sqrt(s^2 + e_i^2)) + (1 - p_i) N(x_i | mu_f, sqrt(s_f^2 + e_i^2))

- ``mu`` (``mean_feh``): uniform on :data:`MEAN_PRIOR_DEX` ([-4.5, 1.0] dex);
- ``s`` (``spread_feh``): the intrinsic spread, uniform on [0, :data:`SPREAD_MAX_DEX` = 1] dex (a
  uniform prior keeps the posterior's mass near 0 when the data do not resolve a spread, so that
  its 95% quantile is a proper upper limit; a log-uniform prior would need an arbitrary floor
  that then sets the limit);
- ``p_i``: the star's membership probability from the dynamical fit (velocities and positions).
  Given its class, a star's metallicity is taken as independent of its velocity, so that the
  membership posterior of the dynamics is the prior membership of the chemistry: a mixture, not
  weights (weighting each star's log-likelihood by p_i is not a likelihood and would let a
  metal-rich field star with p_i = 0.5 inflate the spread by half its full pull).
- the field's [Fe/H] distribution: a fixed broad Gaussian :data:`FIELD_FEH` (mean -1.0, sigma
  1.0 dex; a broad stand-in for the Galactic field's stars along a halo sight line, common
  practice), so that a star far from the members' mean counts as a likely field star instead of
  a spread.

Is the spread resolved? By the likelihood-ratio test of s = 0 (mu profiled): resolved when
2 [ln L(mu_hat, s_hat) - ln L(mu_hat_0, 0)] >= 4, the threshold the velocity dispersion uses
(:mod:`halo.inference.resolution`). s = 0 lies on the boundary of the parameter space, so under
the null the statistic follows the 50:50 mixture of chi^2_0 and chi^2_1 (Chernoff 1954; Self &
Liang 1987, case 5): the false-resolution rate is 0.5 P(chi^2_1 > 4) = 0.023.

Sampling: NUTS through :func:`halo.inference.sampling.run_nuts`; the stars are padded to a bucket
size with a mask and passed as arguments of the compiled program (as in
:mod:`halo.inference.padding`), so that every catalogue of a similar size reuses one program.
"""

import jax.numpy as jnp
import numpy as np
from scipy import optimize

from halo.inference.padding import bucket_size

__all__ = [
    "MEAN_PRIOR_DEX",
    "SPREAD_MAX_DEX",
    "FIELD_FEH",
    "RESOLVED_TWO_DELTA_LN_L",
    "feh_inputs",
    "make_feh_model",
    "log_likelihood",
    "spread_test",
]

#: uniform prior on the mean [Fe/H] [dex]
MEAN_PRIOR_DEX = (-4.5, 1.0)
#: the spread's uniform prior is [0, SPREAD_MAX_DEX] [dex]
SPREAD_MAX_DEX = 1.0
#: (mean, sigma) [dex] of the field stars' [Fe/H] distribution (a broad Gaussian, common practice)
FIELD_FEH = (-1.0, 1.0)
#: 2 delta ln L at or above which the spread counts as resolved (see the module notes)
RESOLVED_TWO_DELTA_LN_L = 4.0
_P_FLOOR = 1e-12  # membership probabilities are clipped to [floor, 1 - floor]


def feh_inputs(feh, feh_err, member_prob=None, field=FIELD_FEH, size=None):
    """The model's inputs (a dict of float64 JAX arrays) of the stars with a measured [Fe/H].

    ``feh``, ``feh_err`` [dex] per star (NaN: not measured, dropped); ``member_prob`` per star
    (None: all members); ``field`` the (mean, sigma) of the field's [Fe/H]. Padded with copies of
    the first star and ``mask`` 0 to ``size`` (default the bucket of :mod:`halo.inference.padding`).
    Returns (inputs, number of real stars).
    """
    feh = np.asarray(feh, dtype=float)
    err = np.asarray(feh_err, dtype=float)
    p = np.ones(feh.shape) if member_prob is None else np.asarray(member_prob, dtype=float)
    keep = np.isfinite(feh) & np.isfinite(err) & (err > 0)
    feh, err, p = feh[keep], err[keep], np.clip(p[keep], _P_FLOOR, 1.0 - _P_FLOOR)
    n = feh.size
    if n == 0:
        raise ValueError("no star with a measured [Fe/H]")
    size = bucket_size(n) if size is None else int(size)
    pad = size - n

    def padded(a, fill):
        return jnp.asarray(np.concatenate([a, np.full(pad, fill)]), dtype=jnp.float64)

    inputs = {
        "feh": padded(feh, feh[0]),
        "err": padded(err, err[0]),
        "log_p": padded(np.log(p), np.log(0.5)),
        "log_q": padded(np.log1p(-p), np.log(0.5)),
        "mask": padded(np.ones(n), 0.0),
        "field": jnp.asarray(field, dtype=jnp.float64),
        "mean_prior": jnp.asarray(MEAN_PRIOR_DEX, dtype=jnp.float64),
        "spread_max": jnp.asarray(SPREAD_MAX_DEX, dtype=jnp.float64),
    }
    return inputs, n


def _per_star(xp, inputs, mu, spread):
    """Per-star mixture log-likelihood (``xp``: numpy or jax.numpy)."""
    x, e2 = inputs["feh"], inputs["err"] ** 2
    var_m = spread**2 + e2
    var_f = inputs["field"][1] ** 2 + e2
    log_m = -0.5 * ((x - mu) ** 2 / var_m + xp.log(2 * np.pi * var_m))
    log_f = -0.5 * ((x - inputs["field"][0]) ** 2 / var_f + xp.log(2 * np.pi * var_f))
    return xp.logaddexp(inputs["log_p"] + log_m, inputs["log_q"] + log_f)


def log_likelihood(inputs, mu, spread):
    """Total log-likelihood (JAX, differentiable) of the real (mask 1) stars."""
    return jnp.sum(inputs["mask"] * _per_star(jnp, inputs, mu, spread))


def make_feh_model(inputs, fixed_spread=None):
    """numpyro model of the module notes; ``model.compile_args`` = (inputs,) for run_nuts.

    ``fixed_spread``: sample only the mean at this known spread [dex] (a check against the
    closed-form posterior; None samples the spread too).
    """
    import numpyro
    import numpyro.distributions as dist

    def model(inputs=inputs):
        lo, hi = inputs["mean_prior"][0], inputs["mean_prior"][1]
        mu = numpyro.sample("mean_feh", dist.Uniform(lo, hi))
        if fixed_spread is None:
            spread = numpyro.sample("spread_feh", dist.Uniform(0.0, inputs["spread_max"]))
        else:
            spread = jnp.asarray(float(fixed_spread))
        numpyro.factor("feh", log_likelihood(inputs, mu, spread))

    model.compile_args = (inputs,)
    model.latent = ("mean_feh",) if fixed_spread is not None else ("mean_feh", "spread_feh")
    return model


def _real(inputs):
    """The real stars' arrays as numpy (for the test below, outside any trace)."""
    m = np.asarray(inputs["mask"]) > 0
    out = {k: np.asarray(inputs[k])[m] for k in ("feh", "err", "log_p", "log_q")}
    out["field"] = np.asarray(inputs["field"])
    return out


def _profile_mu(data, spread, lo, hi, n_grid=401):
    """max over mu of ln L at ``spread`` (coarse grid in [lo, hi], then bounded refinement)."""
    mus = np.linspace(lo, hi, n_grid)
    ll = np.sum(_per_star(np, data, mus[:, None], spread), axis=1)
    k = int(np.argmax(ll))
    step = mus[1] - mus[0]
    res = optimize.minimize_scalar(
        lambda m: -np.sum(_per_star(np, data, m, spread)),
        bounds=(mus[max(k - 1, 0)], mus[min(k + 1, n_grid - 1)]),
        method="bounded",
        options={"xatol": 1e-6 * step},
    )
    return max(-float(res.fun), float(ll[k])), float(res.x)


def spread_test(inputs, n_spread=201):
    """The likelihood-ratio test of a zero spread (module notes).

    Returns a dict: ``two_delta_ln_l``, ``resolved`` (>= :data:`RESOLVED_TWO_DELTA_LN_L`),
    ``spread_hat_dex`` (the maximum-likelihood spread, on a grid of ``n_spread`` points over the
    prior refined by a bounded search) and ``p_value`` under the chi-bar-squared null
    (Self & Liang 1987), and ``rule`` (one line).
    """
    from scipy import stats

    data = _real(inputs)
    lo, hi = (float(v) for v in np.asarray(inputs["mean_prior"]))
    s_max = float(inputs["spread_max"])
    ll0, _ = _profile_mu(data, 0.0, lo, hi)
    grid = np.linspace(0.0, s_max, n_spread)
    prof = np.array([_profile_mu(data, s, lo, hi)[0] for s in grid])
    k = int(np.argmax(prof))
    ll_hat, s_hat = prof[k], grid[k]
    if k > 0:
        res = optimize.minimize_scalar(
            lambda s: -_profile_mu(data, s, lo, hi)[0],
            bounds=(grid[k - 1], grid[min(k + 1, n_spread - 1)]),
            method="bounded",
        )
        if -res.fun > ll_hat:
            ll_hat, s_hat = -float(res.fun), float(res.x)
    two_dl = max(0.0, 2.0 * (ll_hat - ll0))
    return {
        "two_delta_ln_l": float(two_dl),
        "resolved": bool(two_dl >= RESOLVED_TWO_DELTA_LN_L),
        "spread_hat_dex": float(s_hat),
        "p_value": float(0.5 * stats.chi2.sf(two_dl, 1)) if two_dl > 0 else 1.0,
        "rule": (
            "resolved when 2 delta ln L >= 4 against a zero spread (mean profiled; "
            "chi-bar-squared null, Self & Liang 1987: false-resolution rate 2.3%)"
        ),
    }
