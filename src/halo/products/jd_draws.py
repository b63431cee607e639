"""J, D and their angular profiles per posterior draw of a dark model (each draw at its own
distance), evaluated by :func:`halo.core.batching.map_draws`.

Every function takes ``r_cut``, the truncation radius [kpc] of each draw's halo: the draw's
Jacobi radius when the fit truncated (:mod:`halo.products.jd_truncation`), inf for none
(:func:`halo.physics.tides.truncated`: r_t replaced by min(r_t, r_cut))."""

import math

import jax.numpy as jnp
import numpy as np

from halo.core.batching import map_draws
from halo.core.constants import DEG, MSUN2_KPC5_TO_GEV2_CM5, MSUN_KPC2_TO_GEV_CM2
from halo.core.vocabulary import ANGLE_2RH, STANDARD_ANGLES, angle_key
from halo.inputs.build import build_mass_model
from halo.physics.cosmology import rho_crit
from halo.physics.jfactor import d_factor, dd_domega, dj_domega, j_factor, log10_d, log10_j
from halo.physics.tides import truncated

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
    def dark(vals, re, cut=None):
        _, d = build_mass_model(spec, vals, satellite.light(re), rho_c)
        return d if cut is None else truncated(d, cut)

    return dark


def _no_cut(r_cut, n):
    return np.full(n, np.inf) if r_cut is None else np.asarray(r_cut, float)


def _stack(res, cols, labels, suffix=""):
    return {
        f"log10_{kind}{suffix}": np.stack(
            [res[kind + suffix + cols[k][0]][:, cols[k][1]] for k in labels], axis=1
        )
        for kind in ("j", "d")
    }


def jd_draws(spec, satellite, values, distance, r_e, angles, batch=1000, r_cut=None):
    """log10 J [GeV^2 cm^-5] and log10 D [GeV cm^-2] per draw, in cones of half-angle ``angles``
    [deg] (which must hold the standard angles) and then at "2rh", each draw's 2 R_e / d, of
    the halo truncated at ``r_cut`` [kpc] per draw (None or inf: untruncated).

    Returns {"labels", "half_angle_deg", "per_draw", "log10_j", "log10_d", "log10_j_untruncated",
    "log10_d_untruncated", "angle_2rh_deg"}: row labels (angle keys, then "2rh"), the
    half-angles (the median of the per-draw angle for "2rh"), whether the angle is per draw,
    arrays (draws, rows), and the per-draw 2rh angle. The standard angles and "2rh" are computed
    as :func:`halo.results.derived.derive` computes summary.json's ``log10_j`` and ``log10_d``
    (same calls on the same draws, cut at the r_J the fit stored).
    """
    dark_of = _dark_of(spec, satellite, rho_crit())
    keys = [angle_key(a) for a in angles]
    std_keys = [angle_key(a) for a in STANDARD_ANGLES]
    extra = [a for a, k in zip(angles, keys, strict=True) if k not in std_keys]
    std, ext = jnp.asarray(STANDARD_ANGLES, float), jnp.asarray(extra, float)

    r_cut = _no_cut(r_cut, len(distance))
    cutting = bool(np.any(np.isfinite(r_cut)))

    def one(vals, d, re, rc):
        full = dark_of(vals, re)
        a_2rh = 2.0 * re / d / DEG  # as in halo.results.derived: circularised projected R_e
        th = jnp.concatenate([std, jnp.atleast_1d(a_2rh)])
        out = {"a": a_2rh}
        for suffix, dark in (("", truncated(full, rc)), ("_untruncated", full))[: 1 + cutting]:
            out.update({"j" + suffix: log10_j(dark, d, th), "d" + suffix: log10_d(dark, d, th)})
            if extra:
                out.update({"j" + suffix + "x": log10_j(dark, d, ext)})
                out.update({"d" + suffix + "x": log10_d(dark, d, ext)})
        return out

    res = map_draws(one, values, distance, r_e, r_cut, batch=batch)
    cols = {k: ("", i) for i, k in enumerate(std_keys)}
    cols.update({k: ("x", i) for i, k in enumerate(angle_key(a) for a in extra)})
    cols[ANGLE_2RH] = ("", len(std_keys))
    labels = keys + [ANGLE_2RH]
    out = _stack(res, cols, labels)
    # untruncated beside the reported values (the same arrays when nothing is cut)
    unc = _stack(res, cols, labels, "_untruncated") if cutting else {}
    out["log10_j_untruncated"] = unc.get("log10_j_untruncated", out["log10_j"])
    out["log10_d_untruncated"] = unc.get("log10_d_untruncated", out["log10_d"])
    a = np.asarray(res["a"])
    out.update(
        labels=labels,
        half_angle_deg=[float(x) for x in angles] + [float(np.median(a[np.isfinite(a)]))],
        per_draw=[False] * len(keys) + [True],
        angle_2rh_deg=a,
    )
    return out


def whole_halo_draws(spec, satellite, values, distance, r_e, cones_deg, batch=256, r_cut=None):
    """Per draw: J, D [GeV, cm] in cones ``cones_deg`` and of the whole halo (the cone tangent
    to the truncation radius r_t, arcsin(r_t / d), at most :data:`WHOLE_HALO_MAX_DEG`), and
    that cone's half-angle [deg]; the halo cut at ``r_cut`` [kpc] per draw (None: uncut)."""
    dark_of = _dark_of(spec, satellite, rho_crit())
    cones = jnp.asarray(cones_deg, float)
    s_max = math.sin(WHOLE_HALO_MAX_DEG * DEG)

    def one(vals, d, re, rc):
        dark = dark_of(vals, re, rc)
        ref = jnp.arcsin(jnp.minimum(dark.r_edge() / d, s_max)) / DEG
        return {
            "j": j_factor(dark, d, cones) * MSUN2_KPC5_TO_GEV2_CM5,
            "d": d_factor(dark, d, cones) * MSUN_KPC2_TO_GEV_CM2,
            "j_all": j_factor(dark, d, ref) * MSUN2_KPC5_TO_GEV2_CM5,
            "d_all": d_factor(dark, d, ref) * MSUN_KPC2_TO_GEV_CM2,
            "ref_deg": ref,
        }

    return map_draws(one, values, distance, r_e, _no_cut(r_cut, len(distance)), batch=batch)


def profile_draws(spec, satellite, values, distance, r_e, grid_deg, cone_deg, batch=32, r_cut=None):
    """Per draw: dJ/dOmega, dD/dOmega on ``grid_deg`` and J, D in cones ``cone_deg`` (GeV, cm),
    the halo cut at ``r_cut`` [kpc] per draw (None: uncut)."""
    dark_of = _dark_of(spec, satellite, rho_crit())
    grid = jnp.asarray(grid_deg, float)
    cones = jnp.asarray(cone_deg, float)

    def one(vals, d, re, rc):
        dark = dark_of(vals, re, rc)
        return {
            "dj": dj_domega(dark, d, grid) * MSUN2_KPC5_TO_GEV2_CM5,
            "dd": dd_domega(dark, d, grid) * MSUN_KPC2_TO_GEV_CM2,
            "j": j_factor(dark, d, cones) * MSUN2_KPC5_TO_GEV2_CM5,
            "d": d_factor(dark, d, cones) * MSUN_KPC2_TO_GEV_CM2,
        }

    return map_draws(one, values, distance, r_e, _no_cut(r_cut, len(distance)), batch=batch)
