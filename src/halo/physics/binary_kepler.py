"""Kepler orbits: the eccentric anomaly and the primary's line-of-sight velocity at any time."""

import numpy as np

__all__ = ["solve_kepler", "los_velocity"]


def solve_kepler(mean_anomaly, e, tol=1e-14, max_iter=50):
    """Eccentric anomaly E from Kepler's equation M = E - e sin E (vectorised Newton).

    Parameters
    ----------
    mean_anomaly : array_like
        M [rad], any real value (reduced to [0, 2 pi)).
    e : array_like
        Eccentricity in [0, 1); broadcasts against M.
    tol : float
        Newton steps stop when every |dE| < tol [rad]; the residual |E - e sin E - M| is then
        below ~1e-14 (tested to 1e-12 for e <= 0.99).
    max_iter : int
        Maximum Newton iterations (convergence is quadratic; ~5 suffice for e <= 0.9).

    Returns
    -------
    E : ndarray [rad], in [0, 2 pi).

    Notes
    -----
    Starting guess E0 = M + 0.85 e sign(sin M) (Danby 1987, Celest. Mech. 40, 303), from which
    Newton's method converges for all e < 1.
    """
    m = np.mod(np.asarray(mean_anomaly, dtype=float), 2 * np.pi)
    e = np.asarray(e, dtype=float)
    m, e = np.broadcast_arrays(m, e)
    big_e = m + 0.85 * e * np.sign(np.sin(m))
    for _ in range(max_iter):
        step = (big_e - e * np.sin(big_e) - m) / (1.0 - e * np.cos(big_e))
        big_e = big_e - step
        if np.all(np.abs(step) < tol):
            break
    return big_e


def los_velocity(orbits, t_days=0.0):
    """Line-of-sight velocity of the primary about the binary's centre of mass [km/s].

    Parameters
    ----------
    orbits : Orbits
    t_days : float or array_like
        Time(s) [day] after the reference epoch t = 0; broadcasts against the orbit arrays (use
        ``t[:, None]`` for several epochs of every orbit, giving shape (n_epochs, n_orbits)).

    Returns
    -------
    v : ndarray [km/s]

    Notes
    -----
    M(t) = M0 + 2 pi t / P;  M = E - e sin E;
    f = 2 atan2(sqrt(1 + e) sin(E/2), sqrt(1 - e) cos(E/2));
    v = K [cos(omega + f) + e cos omega]  (e.g. Hilditch 2001, An Introduction to Close Binary
    Stars, ch. 2 [memory]).
    """
    t = np.asarray(t_days, dtype=float)
    mean = orbits.mean_anomaly0 + 2 * np.pi * t / orbits.period_days
    e = orbits.e
    big_e = solve_kepler(mean, e)
    f = 2.0 * np.arctan2(np.sqrt(1.0 + e) * np.sin(big_e / 2), np.sqrt(1.0 - e) * np.cos(big_e / 2))
    return orbits.k_kms * (np.cos(orbits.omega + f) + e * np.cos(orbits.omega))
