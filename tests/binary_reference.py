"""Brute-force reference for the binary-star likelihood of one member star, independent of the
likelihood code: a direct average over many orbits of the exact per-orbit likelihood.

For one orbit with primary velocities b_j at the star's epochs t_j, the star's epochs
v_j ~ N(v_sys + u + b_j, e_j^2) with its own velocity in the satellite u ~ N(0, sigma^2) the same
at every epoch. The per-orbit likelihood integrates u out; here it is the multivariate normal
density of the epoch vector with mean v_sys + b and covariance diag(e^2) + sigma^2 (a rank-one
update, the same integral done by the linear-Gaussian marginal; common practice), evaluated with
scipy.stats.multivariate_normal, not with the project's closed form. The Kepler equation is
solved with scipy.optimize.newton (vectorised), not with the project's solver; only the orbit
population (periods, masses, eccentricities, orientations, phases: the model's prior) is drawn
with halo.physics.binaries.sample_orbits.
"""

import astropy.constants as const
import astropy.units as u
import numpy as np
from scipy.optimize import newton
from scipy.special import logsumexp
from scipy.stats import multivariate_normal

#: (2 pi G Msun / day)^(1/3) [km/s], from astropy's constants (Kepler's third law)
K_UNIT_KMS = float(((2 * np.pi * const.G * const.M_sun / u.day) ** (1 / 3)).to_value(u.km / u.s))


def _eccentric_anomaly(mean_anomaly, e):
    m = np.mod(mean_anomaly, 2 * np.pi)
    return newton(
        lambda x: x - e * np.sin(x) - m,
        np.where(e > 0.8, np.pi * np.ones_like(m), m),
        fprime=lambda x: 1.0 - e * np.cos(x),
        tol=1e-13,
        maxiter=200,
    )


def primary_velocities(orbits, t_days):
    """(n_orbits, n_epochs) line-of-sight velocity of the primary [km/s]; v = K (cos(omega + f)
    + e cos omega), the textbook radial-velocity curve (common practice)."""
    t = np.asarray(t_days, dtype=float)[None, :]
    p, e = orbits.period_days[:, None], orbits.e[:, None]
    mean = orbits.mean_anomaly0[:, None] + 2 * np.pi * t / p
    ecc = _eccentric_anomaly(mean, np.broadcast_to(e, mean.shape))
    nu = 2 * np.arctan2(np.sqrt(1 + e) * np.sin(ecc / 2), np.sqrt(1 - e) * np.cos(ecc / 2))
    m_tot = orbits.m1 + orbits.m2
    k = K_UNIT_KMS * orbits.m2 * p[:, 0] ** (-1 / 3) * m_tot ** (-2 / 3) * orbits.sin_i
    k = k / np.sqrt(1 - orbits.e**2)
    omega = orbits.omega[:, None]
    return k[:, None] * (np.cos(omega + nu) + e * np.cos(omega))


def log_like_binary(v, err, t_days, v_sys, sigma, b):
    """ln < N(v | v_sys + b, diag(err^2) + sigma^2) >_orbits for a star's epoch vector ``v``,
    with ``b`` the (n_orbits, n_epochs) primary velocities."""
    v, err = np.asarray(v, float), np.asarray(err, float)
    cov = np.diag(err**2) + sigma**2
    dens = multivariate_normal(mean=np.zeros(len(v)), cov=cov)
    lp = dens.logpdf(v[None, :] - v_sys - b)
    return float(logsumexp(np.atleast_1d(lp)) - np.log(len(b)))


def log_like_single(v, err, v_sys, sigma):
    """ln N(v | v_sys, diag(err^2) + sigma^2): the same star without orbital motion."""
    v, err = np.asarray(v, float), np.asarray(err, float)
    cov = np.diag(err**2) + sigma**2
    return float(multivariate_normal(mean=np.full(len(v), v_sys), cov=cov).logpdf(v))
