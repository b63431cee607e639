"""J, D and their angular profiles per posterior draw of a dark model (each draw at its own
distance), evaluated by :func:`halo.core.batching.map_draws`."""

import math

import jax.numpy as jnp
import numpy as np

from halo.core.batching import map_draws
from halo.core.constants import DEG, MSUN2_KPC5_TO_GEV2_CM5, MSUN_KPC2_TO_GEV_CM2
from halo.core.vocabulary import ANGLE_2RH, STANDARD_ANGLES, angle_key
from halo.inputs.build import build_mass_model
from halo.physics.cosmology import rho_crit
from halo.physics.jfactor import d_factor, dd_domega, dj_domega, j_factor, log10_d, log10_j

__all__ = ["needed_sites", "jd_draws", "profile_draws", "whole_halo_draws", "WHOLE_HALO_MAX_DEG"]

#: posterior sites every dark model needs besides the spec's parameters
_NUISANCE_SITES = ("distance", "r_e_kpc", "m_star")

#: widest cone [deg] taken for "the whole halo" when the truncation radius is beyond the cone
#: tangent to it (untruncated haloes): the exact cone J is accurate to 2e-8 there
#: (halo.physics.jfactor_cone.j_factor); what it leaves out lies behind the observer
WHOLE_HALO_MAX_DEG = 80.0


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
    """log10 J [GeV^2 cm^-5] and log10 D [GeV cm^-2] per draw, in cones of half-angle ``angles``
    [deg] (which must hold the standard angles) and then at "2rh", each draw's 2 R_e / d.

    Returns {"labels", "half_angle_deg", "per_draw", "log10_j", "log10_d", "angle_2rh_deg"}:
    row labels (angle keys, then "2rh"), the half-angles (the median of the per-draw angle for
    "2rh"), whether the angle is per draw, arrays (draws, rows), and the per-draw 2rh angle.
    The standard angles and "2rh" are computed exactly as :func:`halo.results.derived.derive`
    computes summary.json's ``log10_j`` and ``log10_d`` (same call on the same draws).
    """
    dark_of = _dark_of(spec, satellite, rho_crit())
    keys = [angle_key(a) for a in angles]
    std_keys = [angle_key(a) for a in STANDARD_ANGLES]
    extra = [a for a, k in zip(angles, keys, strict=True) if k not in std_keys]
    std, ext = jnp.asarray(STANDARD_ANGLES, float), jnp.asarray(extra, float)

    def one(vals, d, re):
        dark = dark_of(vals, re)
        a_2rh = 2.0 * re / d / DEG  # as in halo.results.derived: circularised projected R_e
        th = jnp.concatenate([std, jnp.atleast_1d(a_2rh)])
        out = {"a": a_2rh, "j": log10_j(dark, d, th), "d": log10_d(dark, d, th)}
        if extra:
            out.update(jx=log10_j(dark, d, ext), dx=log10_d(dark, d, ext))
        return out

    res = map_draws(one, values, distance, r_e, batch=batch)
    cols = {k: ("", i) for i, k in enumerate(std_keys)}
    cols.update({k: ("x", i) for i, k in enumerate(angle_key(a) for a in extra)})
    cols[ANGLE_2RH] = ("", len(std_keys))
    labels = keys + [ANGLE_2RH]
    out = {}
    for kind in ("j", "d"):
        out[f"log10_{kind}"] = np.stack(
            [res[kind + cols[k][0]][:, cols[k][1]] for k in labels], axis=1
        )
    a = np.asarray(res["a"])
    out.update(
        labels=labels,
        half_angle_deg=[float(x) for x in angles] + [float(np.median(a[np.isfinite(a)]))],
        per_draw=[False] * len(keys) + [True],
        angle_2rh_deg=a,
    )
    return out


def whole_halo_draws(spec, satellite, values, distance, r_e, cones_deg, batch=256):
    """Per draw: J, D [GeV, cm] in cones ``cones_deg`` and of the whole halo (the cone tangent
    to the truncation radius r_t, arcsin(r_t / d), at most :data:`WHOLE_HALO_MAX_DEG`), and
    that cone's half-angle [deg]."""
    dark_of = _dark_of(spec, satellite, rho_crit())
    cones = jnp.asarray(cones_deg, float)
    s_max = math.sin(WHOLE_HALO_MAX_DEG * DEG)

    def one(vals, d, re):
        dark = dark_of(vals, re)
        ref = jnp.arcsin(jnp.minimum(dark.r_edge() / d, s_max)) / DEG
        return {
            "j": j_factor(dark, d, cones) * MSUN2_KPC5_TO_GEV2_CM5,
            "d": d_factor(dark, d, cones) * MSUN_KPC2_TO_GEV_CM2,
            "j_all": j_factor(dark, d, ref) * MSUN2_KPC5_TO_GEV2_CM5,
            "d_all": d_factor(dark, d, ref) * MSUN_KPC2_TO_GEV_CM2,
            "ref_deg": ref,
        }

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
