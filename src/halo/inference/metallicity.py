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
The inputs carry a leading axis of K catalogues (K = 1 for a fit): K independent catalogues
stacked by :func:`stack_inputs` are K independent posteriors in one run (their joint density is
the product), so that a calibration over many mocks compiles and runs once.
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
    "stack_inputs",
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
    return {k: v[None] for k, v in inputs.items()}, n


def stack_inputs(catalogues, field=FIELD_FEH):
    """K catalogues ``[(feh, feh_err, member_prob), ...]`` as one set of inputs (leading axis K,
    stars padded to the bucket of the largest); returns (inputs, star counts)."""
    size = bucket_size(max(int(np.isfinite(np.asarray(c[0], float)).sum()) for c in catalogues))
    parts = [feh_inputs(*c, field=field, size=size) for c in catalogues]
    inputs = {k: jnp.concatenate([p[0][k] for p in parts]) for k in parts[0][0]}
    return inputs, [p[1] for p in parts]


def _per_star(xp, inputs, mu, spread):
    """Per-star mixture log-likelihood (``xp``: numpy or jax.numpy); ``mu`` and ``spread``
    broadcast against the stars (last axis), the field (mean, sigma) is the last axis of
    ``inputs["field"]``."""
    x, e2 = inputs["feh"], inputs["err"] ** 2
    f_mean, f_sigma = inputs["field"][..., :1], inputs["field"][..., 1:]
    var_m = spread**2 + e2
    var_f = f_sigma**2 + e2
    log_m = -0.5 * ((x - mu) ** 2 / var_m + xp.log(2 * np.pi * var_m))
    log_f = -0.5 * ((x - f_mean) ** 2 / var_f + xp.log(2 * np.pi * var_f))
    return xp.logaddexp(inputs["log_p"] + log_m, inputs["log_q"] + log_f)


def log_likelihood(inputs, mu, spread):
    """Log-likelihood of each catalogue (shape (K,); JAX, differentiable) over its real (mask 1)
    stars; ``mu``, ``spread`` of shape (K,)."""
    per = _per_star(jnp, inputs, jnp.asarray(mu)[:, None], jnp.asarray(spread)[:, None])
    return jnp.sum(inputs["mask"] * per, axis=-1)


def make_feh_model(inputs, fixed_spread=None):
    """numpyro model of the module notes; ``model.compile_args`` = (inputs,) for run_nuts.

    ``fixed_spread``: sample only the mean at this known spread [dex] (a check against the
    closed-form posterior; None samples the spread too).
    """
    import numpyro
    import numpyro.distributions as dist

    def model(inputs=inputs):
        k = inputs["feh"].shape[0]
        lo, hi = inputs["mean_prior"][:, 0], inputs["mean_prior"][:, 1]
        with numpyro.plate("catalogues", k):
            mu = numpyro.sample("mean_feh", dist.Uniform(lo, hi))
            if fixed_spread is None:
                spread = numpyro.sample("spread_feh", dist.Uniform(0.0, inputs["spread_max"]))
            else:
                spread = jnp.full(k, float(fixed_spread))
        numpyro.factor("feh", jnp.sum(log_likelihood(inputs, mu, spread)))

    model.compile_args = (inputs,)
    model.latent = ("mean_feh",) if fixed_spread is not None else ("mean_feh", "spread_feh")
    return model


def _real(inputs, k):
    """Catalogue ``k``'s real stars as numpy arrays (for the test below, outside any trace)."""
    m = np.asarray(inputs["mask"][k]) > 0
    out = {name: np.asarray(inputs[name][k])[m] for name in ("feh", "err", "log_p", "log_q")}
    out["field"] = np.asarray(inputs["field"][k])
    return out


def _max_likelihood(data, lo, hi, s_max, n_mu=201, n_spread=41):
    """(ln L at the maximum over mu and spread, the spread there, max ln L at spread 0): the
    best point of a grid (``n_mu`` means over the data's range within the prior, ``n_spread``
    spreads over the prior), refined by a bounded search (L-BFGS-B in (mu, spread); bounded
    Brent in mu at spread 0)."""
    x = data["feh"]
    mus = np.linspace(max(lo, x.min() - 0.1), min(hi, x.max() + 0.1), n_mu)
    spreads = np.linspace(0.0, s_max, n_spread)
    ll = np.sum(_per_star(np, data, mus[:, None, None], spreads[None, :, None]), axis=-1)
    i, j = np.unravel_index(int(np.argmax(ll)), ll.shape)
    res = optimize.minimize(
        lambda x: -np.sum(_per_star(np, data, x[0], x[1])),
        # off the edge: at spread 0 the gradient in the spread vanishes (ln L depends on s^2)
        np.array([mus[i], max(spreads[j], 0.25 * spreads[1])]),
        method="L-BFGS-B",
        bounds=[(lo, hi), (0.0, s_max)],
    )
    ll_hat, s_hat = (
        (-float(res.fun), float(res.x[1])) if -res.fun > ll[i, j] else (ll[i, j], spreads[j])
    )
    i0 = int(np.argmax(ll[:, 0]))
    res0 = optimize.minimize_scalar(
        lambda m: -np.sum(_per_star(np, data, m, 0.0)),
        bounds=(mus[max(i0 - 1, 0)], mus[min(i0 + 1, n_mu - 1)]),
        method="bounded",
        options={"xatol": 1e-9},
    )
    ll0 = max(-float(res0.fun), float(ll[i0, 0]))
    return float(ll_hat), float(s_hat), ll0


def spread_test(inputs, k=0):
    """The likelihood-ratio test of a zero spread (module notes) for catalogue ``k``.

    Returns a dict: ``two_delta_ln_l``, ``resolved`` (>= :data:`RESOLVED_TWO_DELTA_LN_L`),
    ``spread_hat_dex`` (the maximum-likelihood spread over the prior's range) and ``p_value``
    under the chi-bar-squared null (Self & Liang 1987), and ``rule`` (one line).
    """
    from scipy import stats

    data = _real(inputs, k)
    lo, hi = (float(v) for v in np.asarray(inputs["mean_prior"][k]))
    ll_hat, s_hat, ll0 = _max_likelihood(data, lo, hi, float(inputs["spread_max"][k]))
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
