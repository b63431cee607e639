"""Could a system of stars alone survive its age? Two-body relaxation, evaporation, dissolution.

Every function is vectorised JAX (arrays of posterior draws); masses [Msun], radii [kpc],
velocities [km/s], times [Gyr] unless the name says otherwise.

- Crossing time t_cr = r_h / <v^2>^(1/2) with the virial estimate <v^2> = 0.4 G M / r_h
  (Spitzer 1987, "Dynamical evolution of globular clusters", section 1.2 [memory]; the 0.4
  is common practice), r_h the 3D half-mass radius.
- Half-mass relaxation time (Spitzer 1987, eq. 2-63)::

      t_rh = 0.138 N^(1/2) r_h^(3/2) / (<m>^(1/2) G^(1/2) ln Lambda),  Lambda = 0.4 N

  N = M / <m>, <m> = :data:`MEAN_STELLAR_MASS` (0.5 Msun, an old population; common practice).
  ln Lambda is floored at 1 (Lambda = gamma N loses meaning for a handful of stars).
- Dissolution time in a tidal field, Baumgardt & Makino (2003, MNRAS 340, 227, eq. 7 [memory])::

      t_dis = 1.91 Myr (N / ln(0.02 N))^0.75 (R_G / kpc) (V_G / 220 km/s)^-1 (1 - e)

  calibrated on N-body models of 8192 to 131072 stars (:data:`BM03_N_RANGE` [memory]), R_G the
  apocentre (or the present distance) and V_G the circular speed there. It is used when
  ln(0.02 N) >= 1 (:data:`BM03_MIN_LOG`) and flagged as extrapolated outside the range.
- Below that (a few dozen to ~100 stars: ln(0.02 N) < 1, the formula meaningless) the fallback is
  evaporation: t_ev = t_rh / xi_e with xi_e the fraction of stars lost per t_rh, 0.045 for a
  tidally limited system (Henon 1961, as quoted by Spitzer 1987 section 3.1 [memory]) and
  0.0074 for an isolated one (Spitzer 1987 section 2.2 [memory]: t_ev ~ 136 t_rh, also Binney
  & Tremaine 2008 section 7.5 [memory]); between the two in proportion to the tidal filling
  r_h / r_J up to 0.145 (Henon's tidally limited model [memory]), the tidal value beyond.
- A system whose half-mass radius reaches its Jacobi radius (r_h >= r_J) loses half its mass
  in about one orbit: its dissolution time is at most 2 pi / Omega, whichever method applied.
- Tidal density criterion: the mean density inside r_h, (M / 2) / (4 pi r_h^3 / 3), against the
  density the Jacobi condition asks for (:func:`halo.physics.tides.tidal_density`).
"""

import math

import jax.numpy as jnp

from halo.core.constants import G
from halo.physics.orbits import TIME_UNIT_GYR

__all__ = [
    "MEAN_STELLAR_MASS",
    "BM03_N_RANGE",
    "BM03_MIN_LOG",
    "METHOD_BM03",
    "METHOD_EVAPORATION",
    "crossing_time",
    "relaxation_time",
    "dissolution_bm03",
    "evaporation_time",
    "dissolution_time",
    "half_mass_density",
]

#: mean stellar mass of an old population [Msun] (common practice)
MEAN_STELLAR_MASS = 0.5
#: numbers of stars of the N-body models behind Baumgardt & Makino (2003) [memory]
BM03_N_RANGE = (8192, 131072)
#: the scaling is used where ln(0.02 N) is at least this
BM03_MIN_LOG = 1.0
#: method codes (per draw)
METHOD_BM03, METHOD_EVAPORATION = 0, 1
#: evaporation fraction per relaxation time: tidally limited, isolated [memory]; tidal filling
#: r_h / r_J of Henon's tidally limited model [memory]
XI_TIDAL, XI_ISOLATED, FILLING_TIDAL = 0.045, 0.0074, 0.145
_MYR = 1e-3


def crossing_time(mass, r_h):
    """t_cr = r_h / sqrt(0.4 G M / r_h) [Gyr]."""
    return r_h / jnp.sqrt(0.4 * G * mass / r_h) * TIME_UNIT_GYR


def relaxation_time(mass, r_h, mean_mass=MEAN_STELLAR_MASS, gamma=0.4):
    """Half-mass relaxation time [Gyr], Spitzer (1987) eq. 2-63 with ln Lambda = ln(gamma N),
    floored at 1; N = mass / mean_mass."""
    n = mass / mean_mass
    ln_lambda = jnp.maximum(jnp.log(gamma * n), 1.0)
    t = 0.138 * jnp.sqrt(n) * r_h**1.5 / (jnp.sqrt(mean_mass * G) * ln_lambda)
    return t * TIME_UNIT_GYR


def dissolution_bm03(n_stars, r_g, v_g, ecc=0.0):
    """Baumgardt & Makino (2003) dissolution time [Gyr] (NaN where ln(0.02 N) <= 0)."""
    ln = jnp.log(0.02 * n_stars)
    ok = ln > 0
    x = jnp.where(ok, n_stars / jnp.where(ok, ln, 1.0), 1.0)
    t = 1.91 * _MYR * x**0.75 * r_g * (220.0 / v_g) * (1.0 - ecc)
    return jnp.where(ok, t, jnp.nan)


def evaporation_time(t_rh, filling):
    """t_rh / xi_e [Gyr], xi_e from the tidal filling r_h / r_J (see the module docstring)."""
    w = jnp.clip(filling / FILLING_TIDAL, 0.0, 1.0)
    return t_rh / (XI_ISOLATED + w * (XI_TIDAL - XI_ISOLATED))


def dissolution_time(mass, r_h, r_j, r_g, v_g, omega, ecc=0.0, mean_mass=MEAN_STELLAR_MASS):
    """(t_dis [Gyr], method code) per draw: Baumgardt & Makino (2003) where ln(0.02 N) >= 1,
    else evaporation; capped at one orbit 2 pi / Omega [Omega in km/s/kpc] where r_h >= r_J."""
    n = mass / mean_mass
    use_bm = jnp.log(0.02 * n) >= BM03_MIN_LOG
    t_rh = relaxation_time(mass, r_h, mean_mass)
    t = jnp.where(use_bm, dissolution_bm03(n, r_g, v_g, ecc), evaporation_time(t_rh, r_h / r_j))
    t_orbit = 2.0 * math.pi / omega * TIME_UNIT_GYR
    t = jnp.where(r_h >= r_j, jnp.minimum(t, t_orbit), t)
    return t, jnp.where(use_bm, METHOD_BM03, METHOD_EVAPORATION)


def half_mass_density(mass, r_h):
    """Mean density inside the 3D half-mass radius, (M / 2) / (4 pi r_h^3 / 3) [Msun kpc^-3]."""
    return 1.5 * mass / (4.0 * math.pi * r_h**3)
