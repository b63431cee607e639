"""Where the Milky Way's tides act on the satellite: per draw, the point where they are judged.

With a systemic proper motion in the satellite file, orbits are integrated
:data:`ORBIT_SPAN_GYR` back (:func:`halo.physics.orbits.peri_apo`) from the present position and
velocity of a subsample of posterior draws (the draw's distance and v_sys, the proper motion
drawn from its Gaussian errors): tides are judged at each orbit's pericentre, the Baumgardt &
Makino (2003) distance is the apocentre and the eccentricity (r_apo - r_peri) / (r_apo + r_peri).
Without proper motion they are judged at the present position (the file's
``galactocentric_distance_kpc`` when given, along the direction astropy gives; else astropy's
position at the draw's distance) with a circular orbit, and the output says so.
"""

import numpy as np

from halo.core.quantiles import quantiles
from halo.physics.milky_way import (
    GALCEN_FRAME,
    MILKY_WAY_MODELS,
    galactocentric_phase_space,
    milky_way,
    tidal_field,
)
from halo.physics.orbits import N_STEPS_PER_GYR, peri_apo

__all__ = ["ORBIT_SPAN_GYR", "N_SITE", "tidal_site"]

#: how far back the orbits are integrated [Gyr]
ORBIT_SPAN_GYR = 5.0
#: posterior draws (hence orbits) behind the tidal field
N_SITE = 64


def _draws(samples, key, n):
    return np.asarray(samples[key], float).ravel()[:n] if key in samples else None


def _present(satellite, dist):
    """Present galactocentric positions (n, 3) [kpc] at the distances ``dist``."""
    pos, _ = galactocentric_phase_space(satellite.ra_deg, satellite.dec_deg, dist)
    r_file = satellite.galactocentric_distance_kpc
    if r_file is not None:
        pos = pos * (r_file / np.linalg.norm(pos, axis=-1))[:, None]
    return pos


def _orbits(satellite, gal, dist, v_sys, rng, progress):
    """(present positions, pericentre positions, r_peri, r_apo) of orbits of the draws."""
    n = len(dist)
    s = satellite
    pm_ra = s.pm_ra_cosdec_masyr + (s.pm_ra_cosdec_err_masyr or 0.0) * rng.standard_normal(n)
    pm_dec = s.pm_dec_masyr + (s.pm_dec_err_masyr or 0.0) * rng.standard_normal(n)
    pos, vel = galactocentric_phase_space(s.ra_deg, s.dec_deg, dist, pm_ra, pm_dec, v_sys)
    if progress is not None:
        progress(f"nature: {n} orbits integrated {ORBIT_SPAN_GYR:g} Gyr back")
    steps = int(N_STEPS_PER_GYR * ORBIT_SPAN_GYR)
    r_peri, r_apo, x_peri = peri_apo(gal, pos, vel, -ORBIT_SPAN_GYR, steps)
    return pos, np.asarray(x_peri), np.asarray(r_peri), np.asarray(r_apo)


def _other_models(gal, x_judge, denominator):
    """The other Milky Way models at the same judging points: their enclosed mass and
    ``jacobi_radius_ratio``, r_J in that model over r_J in this one for a fixed satellite mass,
    (denominator / theirs)^(1/3) (a measure of the Milky Way model's systematic error)."""
    out = {}
    for name in MILKY_WAY_MODELS:
        if name == gal.name:
            continue
        f = tidal_field(milky_way(name), x_judge)
        den = np.asarray(f["omega2"] - f["d2phi"])
        out[name] = {
            "enclosed_mass_msun": float(np.median(np.asarray(f["enclosed_mass"]))),
            "jacobi_radius_ratio": float(np.median(np.cbrt(denominator / den))),
        }
    return out


def _orbit_points(satellite, gal, samples, idx, dist, rng, progress):
    """(present, judging positions, r_peri or None, r_g, ecc, where) of the draws ``idx``."""
    if satellite.pm_ra_cosdec_masyr is not None:
        v_sys = np.asarray(samples["v_sys"], float).ravel()[idx]
        present, x_judge, r_peri, r_apo = _orbits(satellite, gal, dist, v_sys, rng, progress)
        where = (
            f"pericentre of orbits integrated {ORBIT_SPAN_GYR:g} Gyr back from the present "
            "position and velocity (distance and v_sys per posterior draw, proper motion drawn "
            "from its errors)"
        )
        return present, x_judge, r_peri, r_apo, (r_apo - r_peri) / (r_apo + r_peri), where
    present = _present(satellite, dist)
    where = "present position, circular orbit assumed (no proper motion in the satellite file)"
    r_now = np.linalg.norm(present, axis=-1)
    return present, present, None, r_now, np.zeros(len(dist)), where


def tidal_site(satellite, samples, rng, *, model=None, n_site=N_SITE, progress=None):
    """(per-draw arrays, summary entry ``nature.tides.milky_way``) of the tidal field.

    ``samples``: posterior draws with ``distance`` and ``v_sys`` (those of the stars-only model);
    ``model``: a Milky Way model name (:data:`halo.physics.milky_way.MILKY_WAY_MODELS`).
    The arrays (length <= n_site): ``denominator`` Omega^2 - d2Phi/dr2 [(km/s/kpc)^2], ``omega``
    [km/s/kpc] and ``mw_density`` [Msun kpc^-3] at the judging point, ``r_judge``, ``r_g``
    [kpc] and ``v_g`` [km/s] (Baumgardt & Makino's distance and circular speed), ``ecc``.
    """
    gal = milky_way() if model is None else milky_way(model)
    dist_all = np.asarray(samples["distance"], float).ravel()
    idx = rng.choice(len(dist_all), size=min(n_site, len(dist_all)), replace=False)
    dist = dist_all[idx]
    present, x_judge, r_peri, r_apo, ecc, where = _orbit_points(
        satellite, gal, samples, idx, dist, rng, progress
    )
    has_pm = r_peri is not None
    field = {k: np.asarray(v) for k, v in tidal_field(gal, x_judge).items()}
    r_judge = np.linalg.norm(x_judge, axis=-1)
    m_judge = field["enclosed_mass"]
    # circular speed at r_g in the plane, v_c^2 = Omega^2 r^2 (same compiled call)
    in_plane = np.stack([r_apo, np.zeros_like(r_apo), np.zeros_like(r_apo)], axis=-1)
    v_g = np.sqrt(np.asarray(tidal_field(gal, in_plane)["omega2"])) * r_apo
    arrays = {
        "denominator": field["omega2"] - field["d2phi"],
        "omega": np.sqrt(field["omega2"]),
        "mw_density": field["mean_density"],
        "r_judge": r_judge,
        "r_g": r_apo,
        "v_g": v_g,
        "ecc": ecc,
    }
    entry = {
        "model": gal.name,
        "description": MILKY_WAY_MODELS[gal.name][1],
        "galactocentric_distance_kpc": float(np.median(r_judge)),
        "enclosed_mass_msun": float(np.median(m_judge)),
        "judged_at": where,
        "galactocentric_distance_q": quantiles(r_judge),
        "enclosed_mass_q": quantiles(m_judge),
        "present_distance_kpc": quantiles(np.linalg.norm(present, axis=-1)),
        "pericentre_kpc": quantiles(r_peri) if has_pm else None,
        "apocentre_kpc": quantiles(r_apo) if has_pm else None,
        "eccentricity": quantiles(ecc) if has_pm else None,
        "n_draws": int(len(dist)),
        "position_source": (
            "galactocentric_distance_kpc from the satellite file"
            if satellite.galactocentric_distance_kpc is not None and not has_pm
            else "astropy Galactocentric frame from ra, dec and the distance draws"
        ),
        "frame": dict(GALCEN_FRAME),
        "other_models": _other_models(gal, x_judge, arrays["denominator"]),
        "pairing": (
            "each model's posterior draws are paired at random with these draws of the tidal field"
        ),
        "enclosed_mass_uncertainty": "none: the Milky Way model gives no uncertainty",
    }
    return arrays, entry
