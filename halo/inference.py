"""The numpyro model: priors from a spec and the satellite file, and the per-star likelihood.

Parameters (sample sites)
-------------------------
From the spec, by prior kind:

- ``log-uniform`` NAME in [low, high]: site ``log10_NAME`` uniform in log10.
- ``uniform`` / ``normal``: site ``NAME``.
- ``symmetrised-uniform``: site ``NAME_sym`` uniform in beta~ = beta / (2 - beta) (so that radial
  and tangential anisotropy get equal prior weight, common practice); beta = 2 beta~ / (1 + beta~).
- ``concentration``: site ``log10_c200`` ~ Normal(log10 c_med(M200), scatter) from the named
  mass-concentration relation; with a galactocentric distance in the satellite file the spec's
  ``subhalo_relation`` is used instead.
- ``fixed``: no site.

Always present (nuisances, so that their uncertainties reach every result):

- ``v_sys`` [km/s]: uniform within +-100 km/s of the catalogue median (the same in every model,
  so it cancels in Bayes factors);
- ``distance`` [kpc]: Normal(distance_kpc, distance_err_kpc), truncated at 1/10 of the value;
- ``r_half_pc`` [pc]: the projected major-axis half-light radius at the file's distance,
  Normal(r_half_pc, r_half_err_pc) truncated positive. The angular size is what is measured, so
  the physical circularised radius is r_half_pc sqrt(1 - e) x distance / distance_kpc;
- the stellar mass [Msun]: ``m_star`` ~ Normal(stellar_mass_msun, err) truncated positive, or,
  from a magnitude, ``ml_v`` uniform in ``stellar_ml_v`` times L_V with ``abs_mag_v`` ~ Normal.

Likelihood
----------
v_i ~ Normal(v_sys, sigma_los(R_i)^2 + err_i^2) with R_i = distance tan(theta_i) (theta_i the
circularised angular radius). sigma_los is solved once per likelihood call on ``n_radii``
log-spaced angles spanning the stars and interpolated linearly in (ln theta, ln sigma_los); the
interpolation weights are fixed data, so the cost grows with the number of stars only through
that interpolation and the sum.
"""

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np
import numpyro
import numpyro.distributions as dist

from halo.anisotropy import symmetrised_to_beta
from halo.build import build_anisotropy, build_mass_model
from halo.concentration import lognormal_prior
from halo.constants import DEG
from halo.cosmology import rho_crit
from halo.jeans import FAST, sigma_los

__all__ = ["FitData", "make_fit_data", "make_model", "V_SYS_HALF_WIDTH"]

V_SYS_HALF_WIDTH = 100.0  # km/s


@jax.tree_util.register_dataclass
@dataclasses.dataclass(frozen=True)
class FitData:
    """Per-star arrays for the likelihood (plain JAX arrays, km/s and radians)."""

    v: jnp.ndarray
    v_err: jnp.ndarray
    theta: jnp.ndarray  # circularised angular radius [rad]
    grid_theta: jnp.ndarray  # angles where sigma_los is solved [rad]
    idx: jnp.ndarray  # interpolation interval per star
    w: jnp.ndarray  # interpolation weight per star (in ln theta)


def make_fit_data(v, v_err, radius_deg, n_radii=32):
    """Arrays for the likelihood from per-star velocities, errors and radii [km/s, deg]."""
    v = np.asarray(v, dtype=float)
    v_err = np.asarray(v_err, dtype=float)
    theta = np.maximum(np.asarray(radius_deg, dtype=float) * DEG, 1e-9)
    lo, hi = np.log(theta.min()) - 0.01, np.log(theta.max()) + 0.01
    x = np.linspace(lo, hi, n_radii)
    q = (np.log(theta) - lo) / (x[1] - x[0])
    idx = np.clip(np.floor(q).astype(int), 0, n_radii - 2)
    w = q - idx
    return FitData(
        v=jnp.asarray(v),
        v_err=jnp.asarray(v_err),
        theta=jnp.asarray(theta),
        grid_theta=jnp.asarray(np.exp(x)),
        idx=jnp.asarray(idx),
        w=jnp.asarray(w),
    )


def _truncated_normal(name, mean, sd, low):
    if sd <= 0:
        return numpyro.deterministic(name, jnp.asarray(mean, dtype=jnp.float64))
    return numpyro.sample(name, dist.TruncatedNormal(mean, sd, low=low))


def sample_nuisances(satellite, v_center):
    """Systemic velocity, distance, half-light radius and stellar mass (sample sites)."""
    v_sys = numpyro.sample(
        "v_sys", dist.Uniform(v_center - V_SYS_HALF_WIDTH, v_center + V_SYS_HALF_WIDTH)
    )
    d0 = satellite.distance_kpc
    distance = _truncated_normal("distance", d0, satellite.distance_err_kpc, 0.1 * d0)
    r_half_pc = _truncated_normal("r_half_pc", satellite.r_half_pc, satellite.r_half_err_pc, 0.0)
    if satellite.stellar_mass_msun is not None:
        m_star = _truncated_normal(
            "m_star", satellite.stellar_mass_msun, satellite.stellar_mass_err_msun, 0.0
        )
    else:
        lo, hi = satellite.stellar_ml_v
        ml = numpyro.sample("ml_v", dist.Uniform(lo, hi)) if hi > lo else lo
        mag0, dmag = satellite.absolute_magnitude_v, satellite.absolute_magnitude_v_err
        mag = numpyro.sample("abs_mag_v", dist.Normal(mag0, dmag)) if dmag > 0 else mag0
        m_star = numpyro.deterministic("m_star", ml * 10.0 ** (-0.4 * (mag - 4.83)))
    r_e_kpc = r_half_pc * 1e-3 * jnp.sqrt(1.0 - satellite.ellipticity) * distance / d0
    numpyro.deterministic("r_e_kpc", r_e_kpc)
    return v_sys, distance, r_e_kpc, m_star


def sample_spec_parameters(spec, satellite):
    """Values of the spec's parameters (dict name -> traced value), sampling their priors."""
    values = {}
    order = sorted(spec.parameters, key=lambda k: spec.parameters[k]["prior"] == "concentration")
    for name in order:
        p = spec.parameters[name]
        kind = p["prior"]
        if kind == "log-uniform":
            lo, hi = np.log10(p["low"]), np.log10(p["high"])
            x = numpyro.sample(f"log10_{name}", dist.Uniform(lo, hi))
            values[name] = numpyro.deterministic(name, 10.0**x)
        elif kind == "uniform":
            values[name] = numpyro.sample(name, dist.Uniform(p["low"], p["high"]))
        elif kind == "normal":
            values[name] = numpyro.sample(name, dist.Normal(p["mean"], p["sigma"]))
        elif kind == "symmetrised-uniform":
            s = numpyro.sample(f"{name}_sym", dist.Uniform(p["low"], p["high"]))
            values[name] = numpyro.deterministic(name, symmetrised_to_beta(s))
        elif kind == "fixed":
            values[name] = jnp.asarray(p["value"], dtype=jnp.float64)
        elif kind == "concentration":
            rel, kw = p["relation"], {}
            if satellite.galactocentric_distance_kpc is not None and "subhalo_relation" in p:
                rel = p["subhalo_relation"]
                kw["distance_kpc"] = satellite.galactocentric_distance_kpc
            mean, sd = lognormal_prior(rel, values["m200"], **kw)
            x = numpyro.sample(f"log10_{name}", dist.Normal(mean, sd))
            values[name] = numpyro.deterministic(name, 10.0**x)
    return values


def sigma_at_stars(sig_grid, data):
    """Linear interpolation of ln sigma_los in ln theta from the grid to the stars."""
    ls = jnp.log(jnp.maximum(sig_grid, 1e-30))
    return jnp.exp(ls[data.idx] * (1.0 - data.w) + ls[data.idx + 1] * data.w)


def make_model(spec, satellite, data, orders=FAST, binaries=None):
    """A numpyro model (no arguments) for ``spec`` fitted to ``data`` (:class:`FitData`).

    ``binaries``: None, or a :class:`halo.binaries.BinaryMixture` (the line-of-sight velocity
    distribution of binary orbital motion as a scale mixture of Gaussians). With it, each star's
    likelihood marginalises over binarity (Minor et al. 2010, ApJ 721, 1142, single-epoch form):
    (1 - f_b) N(v | v_sys, s^2) + f_b sum_k w_k N(v | v_sys, s^2 + s_k^2), s^2 = sigma_los^2 +
    err^2, with the binary fraction ``f_binary`` uniform in [0, 1]. Stars with several epochs
    enter through their mean velocity (the multi-epoch likelihood is not in yet).
    """
    rho_c = rho_crit()
    v_center = float(np.median(np.asarray(data.v)))
    if binaries is not None:
        b_scales = jnp.concatenate([jnp.zeros(1), jnp.asarray(binaries.scales)])
        b_weights = jnp.asarray(binaries.weights)

    def model():
        v_sys, distance, r_e, m_star = sample_nuisances(satellite, v_center)
        values = sample_spec_parameters(spec, satellite)
        values["stellar_mass"] = m_star
        light = satellite.light(r_e)
        mass_model, _ = build_mass_model(spec, values, light, rho_c)
        anis = build_anisotropy(spec, values)
        radii = distance * jnp.tan(data.grid_theta)
        sig = sigma_at_stars(sigma_los(mass_model, light, anis, radii, orders), data)
        var = sig**2 + data.v_err**2
        if binaries is None:
            numpyro.sample("v", dist.Normal(v_sys, jnp.sqrt(var)), obs=data.v)
            return
        f_b = numpyro.sample("f_binary", dist.Uniform(0.0, 1.0))
        probs = jnp.concatenate([jnp.atleast_1d(1.0 - f_b), f_b * b_weights])
        scales = jnp.sqrt(var[:, None] + b_scales[None, :] ** 2)
        comps = dist.Normal(v_sys, scales)
        mix = dist.MixtureSameFamily(
            dist.Categorical(probs=jnp.broadcast_to(probs, scales.shape)), comps
        )
        numpyro.sample("v", mix, obs=data.v)

    return model
