"""The chemistry line of the nature section: mean [Fe/H], its intrinsic spread, whether the data
resolve it, and a one-line reading (summary.json ``nature.metallicity``).

The model, priors and resolution rule are those of :mod:`halo.inference.metallicity`.
"""

import numpy as np

from halo.core.quantiles import quantiles
from halo.inference.metallicity import (
    FIELD_FEH,
    MEAN_PRIOR_DEX,
    SPREAD_MAX_DEX,
    make_feh_model,
    spread_test,
    stack_inputs,
)
from halo.inference.sampling import diagnostics, run_nuts

__all__ = ["metallicity_section", "fit_metallicity", "fit_catalogues", "SAMPLER"]

#: the sampler settings of the metallicity fit (two parameters: short chains suffice; the
#: diagnostics below decide, and an unconverged fit is flagged)
SAMPLER = {"chains": 4, "warmup": 500, "draws": 1000}

_CAUTION = (
    "a resolved [Fe/H] spread is read as self-enrichment in a potential deep enough to keep "
    "supernova ejecta, i.e. a galaxy (Willman & Strader 2012), a caution, not a rule: some "
    "massive star clusters show spreads too, and a spread from few stars rests on their errors "
    "and membership"
)


def fit_catalogues(catalogues, *, seed=0, fixed_spread=None, **sampler):
    """NUTS fit of :mod:`halo.inference.metallicity` to K catalogues at once (independent
    posteriors in one run, see :func:`halo.inference.metallicity.stack_inputs`).

    ``catalogues``: ``[(feh, feh_err, member_prob or None), ...]`` per star (NaN [Fe/H]: not
    measured); ``sampler`` overrides :data:`SAMPLER` (chains, warmup, draws) and other
    :func:`halo.inference.sampling.run_nuts` options. Returns (samples by site as numpy arrays
    of shape (draws, K), :class:`halo.inference.sampling.Diagnostics` over all K, the model
    inputs, the star counts).
    """
    import arviz as az

    inputs, counts = stack_inputs(catalogues, FIELD_FEH)
    model = make_feh_model(inputs, fixed_spread=fixed_spread)
    options = {**SAMPLER, "progress": False, "dense_mass": False, **sampler}
    mcmc = run_nuts(model, seed=int(seed), **options)
    samples = {k: np.asarray(v) for k, v in mcmc.get_samples().items()}
    diag = diagnostics(az.from_numpyro(mcmc), model.latent)
    return samples, diag, inputs, counts


def fit_metallicity(feh, feh_err, member_prob=None, *, seed=0, fixed_spread=None, **sampler):
    """:func:`fit_catalogues` of one catalogue: (samples by site, shape (draws,), diagnostics,
    inputs, number of stars with [Fe/H])."""
    samples, diag, inputs, counts = fit_catalogues(
        [(feh, feh_err, member_prob)], seed=seed, fixed_spread=fixed_spread, **sampler
    )
    return {k: v[:, 0] for k, v in samples.items()}, diag, inputs, counts[0]


def _reading(out):
    mean = out["mean_feh"]
    text = f"[Fe/H] = {mean['median']:.2f} +{mean['p84'] - mean['median']:.2f}"
    text += f"/-{mean['median'] - mean['p16']:.2f}"
    if out["resolved"]:
        s = out["spread_dex"]
        text += (
            f", a resolved spread of {s['median']:.2f} +{s['p84'] - s['median']:.2f}"
            f"/-{s['median'] - s['p16']:.2f} dex: " + _CAUTION
        )
    else:
        text += (
            f", no resolved spread (< {out['spread_upper_95_dex']:.2f} dex, 95%): consistent "
            "with one population as in a star cluster, though the faintest galaxies' spreads "
            "may lie below what these errors detect"
        )
    if not out["converged"]:
        text = "NOT CONVERGED (" + "; ".join(out["problems"]) + "): " + text
    return text


def metallicity_section(stars, member_prob, seed):
    """summary.json ``nature.metallicity``, or None when the catalogue has no [Fe/H].

    ``stars``: :class:`halo.inputs.catalogue.StarData` (``feh``, ``feh_err``; NaN where not
    measured); ``member_prob``: per-star membership probability from the dynamical fit (None: all
    members); ``seed``: the sampler's seed.

    Keys: ``mean_feh`` and ``spread_dex`` (quantiles, dex), ``resolved`` (the likelihood-ratio
    test of :func:`halo.inference.metallicity.spread_test`), ``spread_upper_95_dex`` (the
    posterior's 95% quantile of the spread when not resolved, else None), ``n_stars`` (stars
    with [Fe/H]), ``n_members_expected`` (their summed membership probability), ``converged``,
    ``diagnostics``, ``problems``, ``test``, ``model`` (priors, field distribution, sampler),
    ``caution`` and ``reading`` (one line).
    """
    feh = getattr(stars, "feh", None)
    if feh is None or not np.isfinite(np.asarray(feh, dtype=float)).any():
        return None
    p = None if member_prob is None else np.asarray(member_prob, dtype=float)
    if p is not None and (p.shape != np.shape(feh) or not np.isfinite(p).all()):
        raise ValueError(
            f"member_prob: expected {np.size(feh)} finite values (one per star), got {p.shape}"
        )
    samples, diag, inputs, n = fit_metallicity(feh, stars.feh_err, p, seed=seed)
    test = spread_test(inputs)
    spread = samples["spread_feh"]
    real = np.asarray(inputs["mask"][0]) > 0
    out = {
        "mean_feh": quantiles(samples["mean_feh"]),
        "spread_dex": quantiles(spread),
        "resolved": test["resolved"],
        "spread_upper_95_dex": None if test["resolved"] else float(np.percentile(spread, 95)),
        "n_stars": int(n),
        "n_members_expected": float(np.exp(np.asarray(inputs["log_p"][0])[real]).sum()),
        "converged": bool(diag.converged),
        "diagnostics": diag.as_dict(),
        "problems": diag.problems(),
        "test": test,
        "model": {
            "likelihood": "members N(mean, sqrt(spread^2 + err^2)) mixed with a field "
            "N(field_mean, sqrt(field_sigma^2 + err^2)) by each star's membership probability",
            "mean_prior_dex": list(MEAN_PRIOR_DEX),
            "spread_prior": f"uniform in [0, {SPREAD_MAX_DEX:g}] dex",
            "field_feh_dex": {"mean": FIELD_FEH[0], "sigma": FIELD_FEH[1]},
            "sampler": dict(SAMPLER),
            "seed": int(seed),
        },
        "caution": _CAUTION,
    }
    out["reading"] = _reading(out)
    return out
