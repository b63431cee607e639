"""The classic closed-form mass estimators, from the global dispersion of the likely single
members (summary.json ``estimators``)."""

import numpy as np

from halo.core.vocabulary import ESTIMATOR_NAMES, estimator_key
from halo.physics.estimators import ESTIMATOR_RADIUS, dispersion_ml, propagate
from halo.results.members import LIKELY_BINARY_BAYES_FACTOR

__all__ = ["estimators"]


def _selection(n_stars, member_prob, binary_bf):
    """(mask of the stars used, words for the selection)."""
    use = np.ones(n_stars, dtype=bool)
    why = []
    if member_prob is not None:
        use &= np.asarray(member_prob) >= 0.5
        why.append("member_prob >= 0.5")
    if binary_bf is not None:
        use &= np.asarray(binary_bf) <= LIKELY_BINARY_BAYES_FACTOR
        why.append(f"binary Bayes factor <= {LIKELY_BINARY_BAYES_FACTOR:g}")
    if use.sum() < 3:
        use[:] = True
        why = ["all stars (fewer than 3 pass the selection)"]
    return use, " and ".join(why) if why else "all stars"


def estimators(stars, satellite, member_prob=None, binary_bf=None):
    """The classic mass estimators from the global dispersion of the likely single members.

    With a foreground model, stars with posterior member_prob < 0.5 are left out; with binaries,
    stars whose velocities favour binarity by a Bayes factor above LIKELY_BINARY_BAYES_FACTOR
    (``binary_bf``, :func:`halo.results.members.binary_bayes_factor`: evidence of variability,
    not binary_prob, which for a single-epoch star restates the binary fraction) too. The
    estimators assume neither.
    """
    use, selection = _selection(stars.n_stars, member_prob, binary_bf)
    fit = dispersion_ml(np.asarray(stars.v)[use], np.asarray(stars.v_err)[use])
    r_e = satellite.r_half_circ_kpc
    # r_half_err_pc is the error at fixed distance (angular error x distance_kpc); the distance
    # error enters once, as the relative error of the distance that scales R_e = theta_e d
    r_e_err = satellite.r_half_err_pc * 1e-3 * np.sqrt(1 - satellite.ellipticity)
    d_rel = satellite.distance_err_kpc / satellite.distance_kpc
    out = {
        "sigma_los_kms": fit.sigma,
        "sigma_los_err_kms": fit.sigma_err,
        "n_stars_used": int(use.sum()),
        "selection": selection,
    }
    for name in ESTIMATOR_NAMES:
        if fit.sigma > 0:
            q = propagate(
                name,
                fit.sigma,
                r_e,
                fit.sigma_err,
                r_e_err,
                distance_rel_err=d_rel,
                method="montecarlo",
            )
        else:
            q = None
        out[estimator_key(name)] = None if q is None else q["median"]
        out[name] = q
        out[f"{name}_radius_pc"] = ESTIMATOR_RADIUS[name] * r_e * 1e3
    return out
