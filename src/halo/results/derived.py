"""Posterior draws -> physical quantities, each draw with its own distance and half-light radius.

Per draw (vectorised over draws with ``jax.vmap``):

- ``r_half_3d_pc``: 3D half-light radius r_1/2 of the light profile at the draw's R_e [pc];
- ``m_half_msun``: total mass (halo + stars) inside r_1/2 [Msun];
- ``ml_half_v``: M(<r_1/2) / (L_V / 2), the V-band mass-to-light ratio inside r_1/2 (needs an
  absolute magnitude in the satellite file; its error is drawn per draw). The magnitude holds at
  the file's distance d0, so L_V at the draw's distance d is L_V(M_V) (d / d0)^2;
- ``dark_mass_half_msun``, ``log_slope_half``: dark mass inside and dark log-slope at r_1/2;
- mass and density profiles (dark, stars, total) at :data:`PROFILE_RADII_PC`;
- ``log10_j`` and ``log10_d`` at 0.1, 0.2 and 0.5 deg and at the angle 2 R_e / distance (key
  ``"2rh"``, ``angle_2rh_deg``; R_e the circularised projected half-light radius, see
  :data:`halo.core.vocabulary.ANGLE_2RH_CONVENTION`), with the draw's own R_e and distance, so
  that their uncertainties propagate;
- with ``tides`` (a tidal-field denominator per draw, :mod:`halo.results.truncation`):
  ``r_jacobi_pc``, the draw's own Jacobi radius (:func:`halo.physics.tides.jacobi_radius`, the
  whole mass model: halo + stars); with ``tides["truncate"]`` the dark halo is truncated there
  (:func:`halo.physics.tides.truncated`) for ``log10_j``, ``log10_d`` and ``log10_j_curve``, and
  ``log10_j_untruncated`` / ``log10_d_untruncated`` are the same draws untruncated (equal to
  ``log10_j`` / ``log10_d`` when nothing is truncated). A draw whose field sets no tidal limit
  (r_J NaN) keeps its halo untruncated;
- sigma_los at a set of radii (for the dispersion-profile figure).
"""

import jax.numpy as jnp
import numpy as np

from halo.core.batching import map_draws
from halo.core.constants import DEG
from halo.core.vocabulary import STANDARD_ANGLES, luminosity_v
from halo.inputs.build import build_anisotropy, build_mass_model
from halo.physics.cosmology import rho_crit
from halo.physics.jeans import FAST, sigma_los
from halo.physics.jfactor import log10_d, log10_j
from halo.physics.tides import jacobi_radius, truncated

__all__ = ["CURVE_ANGLES", "PROFILE_RADII_PC", "parameter_values", "derive"]

PROFILE_RADII_PC = (5.0, 10.0, 20.0, 50.0, 100.0, 200.0, 500.0, 1000.0)


def parameter_values(spec, samples):
    """Model parameter values per draw (dict of arrays) from the posterior ``samples``."""
    values = {}
    for name, p in spec.parameters.items():
        if p["prior"] == "fixed":
            n = len(np.asarray(samples["distance"]).ravel())
            values[name] = np.full(n, float(p["value"]))
        else:
            values[name] = np.asarray(samples[name]).ravel()
    values["stellar_mass"] = np.asarray(samples["m_star"]).ravel()
    return values


#: cone half-angles [deg] of the J(theta) curves drawn in the figures
CURVE_ANGLES = tuple(np.geomspace(0.01, 2.0, 16))


def _jd(dark, model, den, d, th, curve, truncate):
    """J and D entries of one draw (truncated at its Jacobi radius when ``truncate``)."""
    out = {"log10_j_untruncated": log10_j(dark, d, th), "log10_d_untruncated": log10_d(dark, d, th)}
    if den is None:
        cut = dark
    else:
        r_j = jacobi_radius(model, den)
        out["r_jacobi_pc"] = r_j * 1e3
        ok = jnp.isfinite(r_j) & (r_j > 0)
        cut = truncated(dark, jnp.where(ok, r_j, jnp.inf)) if truncate else dark
    if cut is dark:
        out.update(log10_j=out["log10_j_untruncated"], log10_d=out["log10_d_untruncated"])
    else:
        out.update(log10_j=log10_j(cut, d, th), log10_d=log10_d(cut, d, th))
    out["log10_j_curve"] = log10_j(cut, d, curve)
    return out


def derive(spec, satellite, samples, *, sigma_angles_deg, rng=None, batch=1000, tides=None):
    """Derived quantities per draw (dict of numpy arrays, leading axis = draws).

    ``sigma_angles_deg``: projected radii, as angles, where sigma_los is given (``sigma_los_kms``,
    at R = distance tan(angle) for each draw's distance). ``tides``: None (no Jacobi radius,
    haloes untruncated) or {"denominator": Omega^2 - d2Phi/dr2 [(km/s/kpc)^2] per draw,
    "truncate": bool} (see the module docstring).
    """
    rng = np.random.default_rng(0) if rng is None else rng
    rho_c = rho_crit()
    values = parameter_values(spec, samples)
    distance = np.asarray(samples["distance"]).ravel()
    r_e = np.asarray(samples["r_e_kpc"]).ravel()
    radii = jnp.asarray(PROFILE_RADII_PC) * 1e-3
    sig_th = jnp.tan(jnp.asarray(sigma_angles_deg) * DEG)
    angles = jnp.asarray(STANDARD_ANGLES)
    curve = jnp.asarray(CURVE_ANGLES)
    truncate = bool(tides is not None and tides.get("truncate", True))
    den_all = None if tides is None else np.asarray(tides["denominator"], float).ravel()

    def one(vals, d, re, den):
        light = satellite.light(re)
        model, dark = build_mass_model(spec, vals, light, rho_c)
        anis = build_anisotropy(spec, vals)
        r3 = light.r_half_3d()
        out = {
            "r_half_3d_pc": r3 * 1e3,
            "m_half_msun": model.mass(r3),
            # beside the closed-form estimators: M(< R_e) (Walker et al. 2009) and
            # M(< 1.8 R_e) (Errani et al. 2018), R_e the circularised projected half-light radius
            "m_re_msun": model.mass(re),
            "m_1p8re_msun": model.mass(1.8 * re),
            "mass_total_msun": model.mass(radii),
            "density_total": model.density(radii),
            "mass_stars_msun": vals["stellar_mass"] * light.enclosed_3d(radii),
            "sigma_los_kms": sigma_los(model, light, anis, d * sig_th, FAST),
        }
        if den is not None and dark is None:
            out["r_jacobi_pc"] = jacobi_radius(model, den) * 1e3
        if dark is not None:
            a_2rh = 2.0 * re / d / DEG  # twice the projected (circularised) half-light radius
            th = jnp.concatenate([angles, jnp.atleast_1d(a_2rh)])
            out.update(
                angle_2rh_deg=a_2rh,
                dark_mass_half_msun=dark.mass(r3),
                log_slope_half=dark.log_slope(r3),
                mass_dark_msun=dark.mass(radii),
                density_dark=dark.density(radii),
                **_jd(dark, model, den, d, th, curve, truncate),
            )
        return out

    res = map_draws(one, values, distance, r_e, den_all, batch=batch)
    lum = _luminosity_draws(satellite, samples, len(distance), rng)
    if lum is not None:
        lum = lum * (distance / satellite.distance_kpc) ** 2
        res["ml_half_v"] = res["m_half_msun"] / (0.5 * lum)
    return res


def _luminosity_draws(satellite, samples, n, rng):
    """L_V [Lsun] per draw at the file's distance: from the sampled magnitude, or the file's
    magnitude and its error."""
    if "abs_mag_v" in samples:
        mag = np.asarray(samples["abs_mag_v"]).ravel()
    elif satellite.absolute_magnitude_v is not None:
        mag = (
            satellite.absolute_magnitude_v
            + satellite.absolute_magnitude_v_err * rng.standard_normal(n)
        )
    else:
        return None
    return luminosity_v(mag)
