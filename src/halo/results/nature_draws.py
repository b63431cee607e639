"""Per posterior draw of one model: Jacobi radius, tidal ratios, truncated J and D, survival.

Each draw of the model (a random subsample of :data:`N_DRAWS`) is paired with a random draw of
the tidal field (:func:`halo.results.tidal_site.tidal_site`). Its satellite is the fitted mass
model (dark halo + stars, or stars alone) with the draw's light profile; the Jacobi radius solves
r_J^3 = G M(<r_J) / (Omega^2 - d2Phi/dr2) (:func:`halo.physics.tides.jacobi_radius`).
Dark haloes are also truncated at r_J for J and D (:func:`halo.physics.tides.truncated`), the
untruncated values computed on the same draws beside them.
"""

import jax.numpy as jnp
import numpy as np

from halo.core.batching import map_draws
from halo.core.constants import DEG
from halo.core.vocabulary import STANDARD_ANGLES
from halo.inputs.build import build_mass_model
from halo.inputs.sky import angle_to_kpc
from halo.physics.cosmology import rho_crit
from halo.physics.jfactor import log10_d, log10_j
from halo.physics.survival import (
    crossing_time,
    dissolution_time,
    half_mass_density,
    relaxation_time,
)
from halo.physics.tides import jacobi_radius, tidal_density, truncated
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
        model, dark = build_mass_model(spec, vals, light, rho_c)
        r_j = jacobi_radius(model, den)
        r3 = light.r_half_3d()
        out = {"r_j": r_j, "r_half_3d": r3, "mass_in_rj": model.mass(r_j)}
        if dark is not None:
            th = jnp.concatenate([jnp.asarray(STANDARD_ANGLES), jnp.atleast_1d(2 * re / d / DEG)])
            cut = truncated(dark, r_j)
            out.update(
                log10_j=log10_j(cut, d, th),
                log10_d=log10_d(cut, d, th),
                log10_j_untruncated=log10_j(dark, d, th),
                log10_d_untruncated=log10_d(dark, d, th),
            )
        return out

    return one


def model_draws(spec, satellite, samples, site, rng, *, r_out_deg, n_draws=N_DRAWS):
    """Per-draw arrays of one model: ``r_j``, ``r_half_3d`` [kpc], ``mass_in_rj`` and
    ``mass_total`` [Msun], ``distance`` [kpc], the paired tidal-field arrays (``site_*``),
    ``r_half_over_jacobi``, ``outermost_over_jacobi`` (projected radius of the outermost
    member over r_J) and, for dark models, truncated and untruncated ``log10_j`` / ``log10_d``."""
    values = parameter_values(spec, samples)
    dist = np.asarray(samples["distance"], float).ravel()
    r_e = np.asarray(samples["r_e_kpc"], float).ravel()
    idx = rng.choice(len(dist), size=min(n_draws, len(dist)), replace=False)
    pair = rng.integers(len(site["denominator"]), size=len(idx))
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
