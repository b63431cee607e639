"""Per-star results: posterior probabilities of membership and of being a binary, and the
members table (``members.ecsv``)."""

import numpy as np

from halo.core.batching import map_draws
from halo.core.fileio import write_ecsv
from halo.core.vocabulary import STARS_ONLY

__all__ = [
    "LIKELY_BINARY_BAYES_FACTOR",
    "binary_bayes_factor",
    "star_probabilities",
    "members_table",
    "write_members",
]

#: a star is a likely binary when the data favour binarity by this Bayes factor: its posterior
#: odds of being a binary over the prior odds f_b / (1 - f_b) (Jeffreys 1961, "substantial"
#: evidence; common practice). A single-epoch star near v_sys has a factor near or below 1 however
#: large the binary fraction: binary_prob alone restates the prior.
LIKELY_BINARY_BAYES_FACTOR = 3.0

#: the per-star terms recorded by a model built with ``keep_terms=True``
_TERM_SITES = (
    "ll_single",
    "ll_binary",
    "ll_member",
    "ll_foreground",
    "log_prior_member",
    "log_prior_non",
)


def _probabilities_of_draw(terms_model):
    """The function of one draw's parameters -> its per-star p_binary and p_member."""
    import jax.numpy as jnp
    from numpyro import handlers

    def one(params, model_args=()):
        tr = handlers.trace(handlers.substitute(handlers.seed(terms_model, 0), data=params))
        t = tr.get_trace(*model_args)
        out = {k: t[k]["value"] for k in _TERM_SITES if k in t}
        if "ll_binary" in out:
            fb = params["f_binary"]
            a = jnp.log1p(-fb) + out["ll_single"]
            b = jnp.log(fb) + out["ll_binary"]
            out["p_binary"] = jnp.exp(b - jnp.logaddexp(a, b))
        if "ll_foreground" in out:
            a = out["log_prior_member"] + out["ll_member"]
            b = out["log_prior_non"] + out["ll_foreground"]
            out["p_member"] = jnp.exp(a - jnp.logaddexp(a, b))
        return {k: out[k] for k in ("p_binary", "p_member") if k in out}

    return one


def star_probabilities(terms_model, samples, latent, batch=256):
    """Posterior mean per-star probabilities of membership and of being a binary.

    Per draw, with the per-star terms of :mod:`halo.inference.likelihood`:
    member: p L_member / (p L_member + (1 - p) L_fg); binary (given membership):
    f_b L_binary / ((1 - f_b) L_single + f_b L_binary). Averaged over the draws. Returns a dict
    with ``member_prob`` and ``binary_prob`` (None when the part is not modelled).
    """
    import jax

    sub = {key: np.asarray(samples[key]) for key in latent}
    one = _probabilities_of_draw(terms_model)
    # the catalogue padded to its bucket goes in as an argument of the compiled program (as in
    # the sampler), so catalogues of similar size share it; the padded stars are cut off after
    args = getattr(terms_model, "compile_args", ())
    vmapped = jax.jit(jax.vmap(one, in_axes=(0, None)))
    per_draw = map_draws(one, sub, batch=batch, compiled=lambda part: vmapped(part, args))
    n_real = getattr(terms_model, "n_stars", None)
    per_draw = {k: v[:, :n_real] if n_real is not None else v for k, v in per_draw.items()}
    n = len(next(iter(samples.values())))
    means = {}
    for key, val in per_draw.items():
        # summed chunk by chunk of ``batch`` draws, then over chunks (the summation order of the
        # published numbers)
        total = 0.0
        for k in range(0, n, batch):
            total = total + val[k : k + batch].sum(axis=0)
        means[key] = total / n
    return {"member_prob": means.get("p_member"), "binary_prob": means.get("p_binary")}


def binary_bayes_factor(res):
    """Per star, the Bayes factor for binarity of a model result (``binary_prob`` and the draws
    of ``f_binary``), or None when binaries are not modelled.

    [p / (1 - p)] / [f / (1 - f)] with p the posterior binary probability and f the posterior
    mean binary fraction: the evidence of the star's own velocities, the prior odds divided out.
    """
    p = res.get("binary_prob")
    if p is None or "f_binary" not in res["samples"]:
        return None
    p = np.clip(np.asarray(p, dtype=float), 1e-12, 1 - 1e-12)
    f = float(np.clip(np.mean(res["samples"]["f_binary"]), 1e-12, 1 - 1e-12))
    return (p / (1 - p)) / (f / (1 - f))


_MEMBERS_NOTE = (
    "member_prob: posterior membership probability under model '{ref}' (1 when the "
    "foreground is not modelled, or the catalogue's member_prob when given and not modelled); "
    "member_prob_prior: the catalogue's column; binary_prob: posterior probability of being a "
    "binary if a member (NaN when binaries are not modelled); binary_bayes_factor: its posterior "
    "odds over the prior odds of the fitted binary fraction (a likely binary above "
    f"{LIKELY_BINARY_BAYES_FACTOR:g}: evidence of variability, not the prior); "
    "radius_pc: circularised, at the "
    "satellite file's distance; v_mean_kms: inverse-variance weighted mean over the epochs; "
    "binary_mc_ess: effective number of Monte Carlo orbits behind the multi-epoch binary term; "
    "ra, dec: ICRS position of the star's first row; xi, eta: offsets east and north of the "
    "satellite centre on the tangent plane of the zenithal equidistant projection (FITS ARC: "
    "their length is the great-circle separation; the radii above come from them); "
    "epoch_chi2: sum of the epochs' squared deviations "
    "from v_mean_kms over their variances, with epoch_chi2_dof = n_epochs - 1 degrees of freedom "
    "and epoch_chi2_p = P(chi2 > epoch_chi2) (scipy.stats.chi2.sf; small values flag a velocity "
    "change, NaN for one epoch)"
)


def _star_columns(t, stars, satellite):
    """Positions, radii, mean velocities and the epochs' chi2 of the stars, with their units."""
    import astropy.units as u

    rad = np.asarray(stars.radius_deg)
    cols = (
        ("ra", stars.ra, u.deg),
        ("dec", stars.dec, u.deg),
        ("xi", stars.xi_deg, u.deg),
        ("eta", stars.eta_deg, u.deg),
        ("radius_deg", rad, u.deg),
        ("radius_pc", np.tan(np.radians(rad)) * satellite.distance_kpc * 1e3, u.pc),
        ("n_epochs", stars.n_epochs, None),
        ("v_mean_kms", stars.v, u.km / u.s),
        ("v_mean_err_kms", stars.v_err, u.km / u.s),
        ("epoch_chi2", stars.chi2, None),
        ("epoch_chi2_dof", stars.chi2_dof, None),
        ("epoch_chi2_p", stars.p_var, None),
    )
    for name, val, unit in cols:
        t[name] = np.asarray(val)
        if unit is not None:
            t[name].unit = unit


def members_table(stars, results, names, satellite):
    """Per star id: member_prob, binary_prob, radius used and epoch count (astropy Table), under
    the first dark model (stars-only when there is none)."""
    from astropy.table import Table

    dark = [n for n in names if n != STARS_ONLY]
    ref = dark[0] if dark else STARS_ONLY
    res = results[ref]
    t = Table()
    t["id"] = np.asarray(stars.id).astype(str)
    mp = res["member_prob"]
    if mp is None:
        mp = np.ones(stars.n_stars) if stars.member_prob is None else stars.member_prob
    t["member_prob"] = np.asarray(mp, dtype=float)
    if stars.member_prob is not None:
        t["member_prob_prior"] = np.asarray(stars.member_prob, dtype=float)
    bp = res["binary_prob"]
    t["binary_prob"] = np.full(stars.n_stars, np.nan) if bp is None else bp
    bf = binary_bayes_factor(res)
    t["binary_bayes_factor"] = np.full(stars.n_stars, np.nan) if bf is None else bf
    _star_columns(t, stars, satellite)
    if res.get("epochs") is not None:
        t["binary_mc_ess"] = np.asarray(res["epochs"].ess)
    for n in names:
        if n != ref and results[n]["member_prob"] is not None:
            t[f"member_prob_{n}"] = results[n]["member_prob"]
    t.meta["model"] = ref
    t.meta["note"] = _MEMBERS_NOTE.format(ref=ref)
    return t


def write_members(path, stars, results, names, satellite):
    """members.ecsv (see :func:`members_table`), written atomically."""
    write_ecsv(path, members_table(stars, results, names, satellite))
