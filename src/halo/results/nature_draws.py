"""Per posterior draw of one model: Jacobi radius, tidal ratios and survival.

Each draw of the model is paired with a draw of the tidal field
(:func:`halo.results.tidal_site.tidal_site`): in a fit, every draw with the same pairing as its
derived quantities (``pair``, :mod:`halo.results.truncation`), so that r_J here is the r_J behind
the reported J and D; else a random subsample of :data:`N_DRAWS` paired at random. Its
satellite is the fitted mass model (dark halo + stars, or stars alone) with the draw's light
profile; the Jacobi radius solves
r_J^3 = G M(<r_J) / (Omega^2 - d2Phi/dr2) (:func:`halo.physics.tides.jacobi_radius`).
J and D truncated at r_J are not computed here: they are the fit's derived ``log10_j`` /
``log10_d`` (every draw), see :func:`halo.results.derived.derive`.
"""

import numpy as np

from halo.core.batching import map_draws
from halo.inputs.build import build_mass_model
from halo.inputs.sky import angle_to_kpc
from halo.physics.cosmology import rho_crit
from halo.physics.survival import (
    crossing_time,
    dissolution_time,
    half_mass_density,
    relaxation_time,
)
from halo.physics.tides import jacobi_radius, tidal_density
from halo.results.derived import parameter_values

__all__ = ["N_DRAWS", "model_draws", "survival_draws", "outermost_member_deg"]

#: posterior draws per model behind the tides section
N_DRAWS = 400


def outermost_member_deg(stars, member_prob):
    """Largest circularised radius [deg] of the likely members (member_prob > 0.5, or all)."""
    r = np.asarray(stars.radius_deg, float)
    if member_prob is not None:
        keep = np.asarray(member_prob, float) > 0.5
        r = r[keep] if keep.any() else r
    return float(np.max(r))


def _one(spec, satellite, rho_c):
    """The per-draw function of one model (traced once by map_draws)."""

    def one(vals, d, re, den):
        light = satellite.light(re)
        model, _ = build_mass_model(spec, vals, light, rho_c)
        r_j = jacobi_radius(model, den)
        return {"r_j": r_j, "r_half_3d": light.r_half_3d(), "mass_in_rj": model.mass(r_j)}

    return one


def model_draws(spec, satellite, samples, site, rng, *, r_out_deg, n_draws=N_DRAWS, pair=None):
    """Per-draw arrays of one model: ``r_j``, ``r_half_3d`` [kpc], ``mass_in_rj`` and
    ``mass_total`` [Msun], ``distance`` [kpc], the paired tidal-field arrays (``site_*``),
    ``r_half_over_jacobi`` and ``outermost_over_jacobi`` (projected radius of the outermost
    member over r_J). ``pair``: each posterior draw's tidal-field index (the fit's pairing);
    None: random."""
    values = parameter_values(spec, samples)
    dist = np.asarray(samples["distance"], float).ravel()
    r_e = np.asarray(samples["r_e_kpc"], float).ravel()
    idx = rng.choice(len(dist), size=min(n_draws, len(dist)), replace=False)
    if pair is None:
        pair = rng.integers(len(site["denominator"]), size=len(idx))
    else:
        pair = np.asarray(pair)[idx]
    sub = {k: np.asarray(v, float)[idx] for k, v in values.items()}
    res = map_draws(
        _one(spec, satellite, rho_crit()), sub, dist[idx], r_e[idx], site["denominator"][pair]
    )
    res = {k: np.asarray(v) for k, v in res.items()}
    res["distance"] = dist[idx]
    res["mass_total"] = sub["stellar_mass"]
    res["r_half_over_jacobi"] = res["r_half_3d"] / res["r_j"]
    res["outermost_over_jacobi"] = angle_to_kpc(r_out_deg, dist[idx]) / res["r_j"]
    for k, v in site.items():
        res[f"site_{k}"] = np.asarray(v)[pair]
    return res


def survival_draws(draws, age_gyr, age_err_gyr, rng):
    """Survival of the stars-only hypothesis per draw (``draws`` from :func:`model_draws` of the
    stars-only model): crossing, relaxation and dissolution times [Gyr], the method code, the
    tidal filling r_h / r_J, the density ratio rho_h / rho_tidal and, with an age, ``survives``
    (t_dis > age drawn from N(age, age_err) and rho_h >= rho_tidal)."""
    m, r_h, r_j = draws["mass_total"], draws["r_half_3d"], draws["r_j"]
    t_dis, method = dissolution_time(
        m, r_h, r_j, draws["site_r_g"], draws["site_v_g"], draws["site_omega"], draws["site_ecc"]
    )
    rho_ratio = half_mass_density(m, r_h) / tidal_density(draws["site_denominator"])
    out = {
        "crossing_time_gyr": np.asarray(crossing_time(m, r_h)),
        "relaxation_time_gyr": np.asarray(relaxation_time(m, r_h)),
        "dissolution_time_gyr": np.asarray(t_dis),
        "method": np.asarray(method),
        "filling": r_h / r_j,
        "density_ratio": np.asarray(rho_ratio),
        "mw_density": draws["site_mw_density"],
        "half_mass_density": np.asarray(half_mass_density(m, r_h)),
    }
    if age_gyr is not None:
        age = age_gyr + (age_err_gyr or 0.0) * rng.standard_normal(len(m))
        age = np.maximum(age, 1e-3)
        out["age_gyr"] = age
        out["survives"] = (out["dissolution_time_gyr"] > age) & (out["density_ratio"] >= 1.0)
    return out
