"""J, D and their angular profiles per posterior draw of a dark model (each draw at its own
distance), evaluated by :func:`halo.core.batching.map_draws`."""

import jax.numpy as jnp

from halo.core.batching import map_draws
from halo.core.constants import MSUN2_KPC5_TO_GEV2_CM5, MSUN_KPC2_TO_GEV_CM2
from halo.inputs.build import build_mass_model
from halo.physics.cosmology import rho_crit
from halo.physics.jfactor import d_factor, dd_domega, dj_domega, j_factor, log10_d, log10_j

__all__ = ["needed_sites", "jd_draws", "profile_draws"]

#: posterior sites every dark model needs besides the spec's parameters
_NUISANCE_SITES = ("distance", "r_e_kpc", "m_star")


def needed_sites(spec):
    """Posterior variables an export reads for a model: its free parameters and the nuisances."""
    names = [k for k, p in spec.parameters.items() if p["prior"] != "fixed"]
    return list(dict.fromkeys(names + list(_NUISANCE_SITES)))


def _dark_of(spec, satellite, rho_c):
    def dark(vals, re):
        _, d = build_mass_model(spec, vals, satellite.light(re), rho_c)
        return d

    return dark


def jd_draws(spec, satellite, values, distance, r_e, angles, batch=1000):
    """log10 J [GeV^2 cm^-5] and log10 D [GeV cm^-2], arrays (draws, angles)."""
    dark_of = _dark_of(spec, satellite, rho_crit())
    th = jnp.asarray(angles, float)

    def one(vals, d, re):
        dark = dark_of(vals, re)
        return {"log10_j": log10_j(dark, d, th), "log10_d": log10_d(dark, d, th)}

    return map_draws(one, values, distance, r_e, batch=batch)


def profile_draws(spec, satellite, values, distance, r_e, grid_deg, cone_deg, batch=32):
    """Per draw: dJ/dOmega, dD/dOmega on ``grid_deg`` and J, D in cones ``cone_deg`` (GeV, cm)."""
    dark_of = _dark_of(spec, satellite, rho_crit())
    grid = jnp.asarray(grid_deg, float)
    cones = jnp.asarray(cone_deg, float)

    def one(vals, d, re):
        dark = dark_of(vals, re)
        return {
            "dj": dj_domega(dark, d, grid) * MSUN2_KPC5_TO_GEV2_CM5,
            "dd": dd_domega(dark, d, grid) * MSUN_KPC2_TO_GEV_CM2,
            "j": j_factor(dark, d, cones) * MSUN2_KPC5_TO_GEV2_CM5,
            "d": d_factor(dark, d, cones) * MSUN_KPC2_TO_GEV_CM2,
        }

    return map_draws(one, values, distance, r_e, batch=batch)
