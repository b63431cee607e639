"""Forward predictions of one model at given parameter values (``halo predict``)."""

import math

import jax.numpy as jnp
import numpy as np

from halo.core.constants import DEG
from halo.core.vocabulary import JD_CONVENTIONS
from halo.inputs.build import build_anisotropy, build_mass_model, check_values
from halo.physics.cosmology import rho_crit
from halo.physics.jeans import DEFAULT, global_dispersion, sigma_los
from halo.physics.jfactor import log10_d, log10_j

__all__ = ["predict", "default_radii_pc", "default_angles_deg"]


def default_radii_pc(satellite):
    """0.25, 0.5, 1, 2 and 4 circularised projected half-light radii [pc]."""
    r = satellite.r_half_circ_kpc * 1e3
    return [f * r for f in (0.25, 0.5, 1.0, 2.0, 4.0)]


def default_angles_deg(satellite):
    """0.1, 0.2, 0.5 deg and the "2rh" angle, 2 R_e / distance (R_e the circularised projected
    half-light radius, :data:`halo.core.vocabulary.ANGLE_2RH_CONVENTION`) [deg]."""
    return [0.1, 0.2, 0.5, 2.0 * satellite.r_half_circ_kpc / satellite.distance_kpc / DEG]


def _floats(x):
    return [float(v) for v in np.atleast_1d(np.asarray(x))]


def predict(spec, satellite, values, radii_pc=None, angles_deg=None, orders=DEFAULT):
    """sigma_los, enclosed mass, log10 J and log10 D of ``spec`` at parameter ``values``.

    Parameters
    ----------
    spec : :class:`halo.inputs.spec.ModelSpec`
    satellite : :class:`halo.inputs.satellite.Satellite` (distance, half-light radius, light
        profile, default stellar mass)
    values : dict of parameter name -> float (see ``halo models``); ``stellar_mass`` [Msun]
        defaults to the satellite file's value
    radii_pc : projected radii for sigma_los and 3D radii for the enclosed mass [pc]
    angles_deg : cone half-angles for J and D [deg]

    Returns
    -------
    dict with the keys ``radii_pc``, ``sigma_los_kms``, ``mass_enclosed_msun`` (3D, total),
    ``angles_deg``, ``log10_j`` [GeV^2 cm^-5], ``log10_d`` [GeV cm^-2] (None without a dark halo),
    plus ``model``, ``parameters`` and ``derived`` (halo in both parametrisations, r_1/2,
    M(<r_1/2), global sigma_los).
    """
    values = dict(values)
    values.setdefault("stellar_mass", satellite.stellar_mass_prior()[0])
    values = check_values(spec, values)
    radii_pc = default_radii_pc(satellite) if radii_pc is None else list(radii_pc)
    angles_deg = default_angles_deg(satellite) if angles_deg is None else list(angles_deg)
    rho_c = rho_crit()
    light = satellite.light()
    jv = {k: jnp.asarray(v, dtype=jnp.float64) for k, v in values.items()}
    model, dark = build_mass_model(spec, jv, light, rho_c)
    anis = build_anisotropy(spec, jv)
    radii = jnp.asarray(radii_pc, dtype=jnp.float64) * 1e-3
    sig = sigma_los(model, light, anis, radii, orders)
    mass = model.mass(radii)
    r3 = light.r_half_3d()
    derived = {
        "r_half_3d_pc": float(r3) * 1e3,
        "m_half_msun": float(model.mass(r3)),
        "sigma_los_global_kms": float(jnp.sqrt(global_dispersion(model, light, anis, orders))),
    }
    out = {
        "model": spec.name,
        "parameters": {k: (None if math.isinf(v) else v) for k, v in values.items()},
        "radii_pc": _floats(radii_pc),
        "sigma_los_kms": _floats(sig),
        "mass_enclosed_msun": _floats(mass),
        "angles_deg": _floats(angles_deg),
        "log10_j": None,
        "log10_d": None,
        "derived": derived,
    }
    if dark is not None:
        th = jnp.asarray(angles_deg, dtype=jnp.float64)
        d = satellite.distance_kpc
        out["log10_j"] = _floats(log10_j(dark, d, th))
        out["log10_d"] = _floats(log10_d(dark, d, th))
        out["jd_conventions"] = dict(JD_CONVENTIONS)
        derived.update(
            rho_s_msun_kpc3=float(dark.rho_s),
            r_s_kpc=float(dark.r_s),
            m200_msun=float(dark.m200(rho_c)),
            c200=float(dark.c200(rho_c)),
            dark_mass_half_msun=float(dark.mass(r3)),
        )
    return out
