"""The binned velocity-dispersion profile of the members, each star weighted by how surely it is
a member and not a binary, and the true profile of a mock (for the figures' truth overlay).

Estimator (per radial bin, :func:`weighted_profile`): the weighted likelihood

    ln L_w(mu, sigma) = sum_i w_i ln N(v_i | mu, sigma^2 + e_i^2),  w_i = p_mem,i (1 - p_bin,i)

maximised over the bin's mean mu and intrinsic dispersion sigma (errors deconvolved, sigma >= 0;
:func:`halo.physics.estimators.dispersion_ml`). With w_i the probabilities that each star belongs
to the (single-star) member population this is the M-step of the EM algorithm for a mixture of
members and others (Dempster, Laird & Rubin 1977, JRSS B 39, 1): its maximum is where the
member component's likelihood equations hold given those probabilities (membership-weighted
dispersions are common practice). The weights' sum overstates the information of fractional
weights, so the 68% interval is the likelihood-ratio interval {sigma : ln L_p >= max - 1/2} of
the weighted log-likelihood rescaled by sum(w) / sum(w^2), i.e. counted with Kish's effective
sample size (sum w)^2 / sum(w^2) (Kish 1965, Survey Sampling; recalled from memory): with all
weights 1 (or all equal) it is the ordinary profile-likelihood interval. The point estimate does
not depend on the rescaling.

Bins hold about equal total weight (stars ordered by radius, cut at equal steps of the cumulative
weight); a bin's radius is the weighted median of its stars' radii.
"""

import math

import numpy as np

from halo.physics.estimators import dispersion_ml

__all__ = ["star_weights", "weighted_profile", "kish_n_eff", "true_profile", "ESTIMATOR_NOTE"]

#: a one-line description of the estimator, written beside the figure's data
ESTIMATOR_NOTE = (
    "per bin: maximum of the weighted likelihood sum_i w_i ln N(v_i | mu, sigma^2 + e_i^2) over "
    "mu and sigma >= 0, w_i = p_member (1 - p_binary); 68% interval: likelihood-ratio interval of "
    "the weighted log-likelihood scaled by sum(w)/sum(w^2) (Kish effective sample size); bins of "
    "about equal total weight, radius = weighted median"
)


def star_weights(member_prob, binary_prob, n):
    """w = p_member (1 - p_binary) per star; a missing part (None) counts as member / single."""
    pm = np.ones(n) if member_prob is None else np.asarray(member_prob, dtype=float)
    pb = np.zeros(n) if binary_prob is None else np.asarray(binary_prob, dtype=float)
    return np.clip(pm, 0.0, 1.0) * (1.0 - np.clip(pb, 0.0, 1.0))


def kish_n_eff(w):
    """Kish's effective sample size (sum w)^2 / sum(w^2) (Kish 1965, Survey Sampling; recalled from
    memory)."""
    w = np.asarray(w, dtype=float)
    s2 = float(np.sum(w**2))
    return float(np.sum(w)) ** 2 / s2 if s2 > 0 else 0.0


def _weighted_median(x, w):
    order = np.argsort(x)
    c = np.cumsum(w[order])
    return float(x[order][np.searchsorted(c, 0.5 * c[-1])])


def _bin_groups(radius, w, n_bins):
    """Index arrays of ``n_bins`` radial bins of about equal total weight (stars with w > 0)."""
    use = np.flatnonzero(w > 0)
    order = use[np.argsort(radius[use])]
    cum = np.cumsum(w[order])
    edges = np.searchsorted(cum, cum[-1] * np.arange(1, n_bins) / n_bins, side="right")
    return [g for g in np.split(order, edges) if g.size >= 2]


def _n_bins(w, per_bin):
    """Number of bins: about ``per_bin`` of weight each (default: total weight / 6, clipped to
    8..60), at least 1."""
    total = float(np.sum(w))
    per = per_bin or float(np.clip(total / 6.0, 8.0, 60.0))
    return max(1, int(total // per))


def weighted_profile(radius_pc, v, v_err, weights, *, per_bin=None, n_bins=None):
    """The membership- and binary-weighted dispersion profile (see the module notes).

    ``radius_pc``, ``v``, ``v_err`` [pc, km/s], ``weights`` in [0, 1] per star; ``per_bin``: the
    total weight of a bin (default: a sixth of the total, 8 to 60), or ``n_bins`` directly.
    Returns a dict of per-bin lists: ``radius_pc`` (weighted median), ``radius_lo_pc``,
    ``radius_hi_pc`` (the bin's smallest and largest radius), ``sigma_kms``, ``sigma_lo_kms``,
    ``sigma_hi_kms`` (68%), ``mean_kms``, ``n_stars`` (w > 0), ``sum_w``, ``n_eff`` (Kish), and
    the ``estimator`` note.
    """
    r = np.asarray(radius_pc, dtype=float)
    v = np.asarray(v, dtype=float)
    e = np.asarray(v_err, dtype=float)
    w = np.asarray(weights, dtype=float)
    keys = (
        "radius_pc",
        "radius_lo_pc",
        "radius_hi_pc",
        "sigma_kms",
        "sigma_lo_kms",
        "sigma_hi_kms",
        "mean_kms",
        "n_stars",
        "sum_w",
        "n_eff",
    )
    out = {k: [] for k in keys}
    if np.sum(w > 0) >= 2:
        nb = n_bins or _n_bins(w, per_bin)
        for g in _bin_groups(r, w, nb):
            wg = w[g]
            scale = float(np.sum(wg) / np.sum(wg**2))
            f = dispersion_ml(v[g], e[g], weights=wg * scale)
            row = (
                _weighted_median(r[g], wg),
                float(r[g].min()),
                float(r[g].max()),
                f.sigma,
                f.sigma_lo,
                f.sigma_hi,
                f.mean,
                int(g.size),
                float(wg.sum()),
                kish_n_eff(wg),
            )
            for k, x in zip(keys, row, strict=True):
                out[k].append(x)
    out["estimator"] = ESTIMATOR_NOTE
    return out


def _rebuilt(registry, name, params):
    """An instance of ``registry[name]`` from a truth record's parameters (JSON null = inf)."""
    kw = {k: (math.inf if x is None else x) for k, x in params.items() if k != "class"}
    return registry[name](**kw)


def true_profile(truth, radii_pc):
    """sigma_los [km/s] of a mock's true model at projected radii [pc]: the Jeans solution
    (:func:`halo.physics.jeans.sigma_los`) of the light profile, dark halo, stellar mass and
    anisotropy recorded in the mock's truth (:func:`halo.mock.catalogue.make_mock`); None when the
    record lacks them."""
    from halo.physics.anisotropy import ANISOTROPIES
    from halo.physics.dark import DARK_PROFILES
    from halo.physics.jeans import sigma_los
    from halo.physics.light import LIGHT_PROFILES
    from halo.physics.mass import MassModel, Stars

    try:
        light = _rebuilt(LIGHT_PROFILES, truth["light_profile"], truth["light"])
        anis = _rebuilt(ANISOTROPIES, truth["anisotropy_model"], truth["anisotropy"])
        stars = Stars(light, float(truth["stellar_mass_msun"]))
        dark = truth.get("dark")
        mass = (
            stars
            if dark is None
            else MassModel((_rebuilt(DARK_PROFILES, truth["dark_profile"], dark), stars))
        )
    except (KeyError, TypeError, ValueError):
        return None
    r_kpc = np.asarray(radii_pc, dtype=float) * 1e-3
    return np.asarray(sigma_los(mass, light, anis, r_kpc), dtype=float)
