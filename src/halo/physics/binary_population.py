"""Binary orbit populations: the population's parameters and a seeded Monte Carlo sample of orbits.

``BinaryPopulation`` holds the (frozen) parameters with documented defaults; ``sample_orbits``
draws ``Orbits`` from it (numpy), rejecting those whose giant would fill its Roche lobe.
"""

import dataclasses

import numpy as np

__all__ = [
    "BinaryPopulation",
    "Orbits",
    "sample_orbits",
    "roche_lobe_fraction",
    "K_UNIT_KMS",
    "A_UNIT_RSUN",
]

#: (2 pi G Msun / 1 day)^(1/3) [km/s]: K = K_UNIT (m2/Msun) (P/day)^(-1/3) (m_tot/Msun)^(-2/3)
#: sin i / sqrt(1 - e^2).  Computed from astropy.constants (CODATA 2018 G, IAU 2015 Msun);
#: the test suite recomputes it.
K_UNIT_KMS = 212.908297

#: (G Msun (1 day)^2 / 4 pi^2)^(1/3) [Rsun]: Kepler's third law a = A_UNIT (m_tot/Msun)^(1/3)
#: (P/day)^(2/3).  Computed from astropy.constants; the test suite recomputes it.
A_UNIT_RSUN = 4.2082783


@dataclasses.dataclass(frozen=True)
class BinaryPopulation:
    """Orbit population of binaries whose primary is the observed (red giant) star.

    Parameters
    ----------
    log_period_mean, log_period_sigma : float
        log10(P / day) ~ Normal(mean, sigma). Defaults 5.03, 2.28 (Raghavan et al. 2010, solar-type
        field binaries); ``BinaryPopulation.duquennoy_mayor91()`` gives 4.8, 2.3.
    q_min, q_max : float
        Mass ratio q = m2/m1 uniform in [q_min, q_max]; default [0.1, 1] (roughly flat,
        Raghavan et al. 2010).
    p_circular_days : float
        Orbits with P < p_circular_days [day] are circular (tidal circularisation); default 12.
        Common practice [memory].
    e_max : float
        Above p_circular_days, e ~ Uniform(0, e_max); default 0.9. Common practice [memory].
    m1_msun : float
        Primary (observed star) mass [Msun]; default 0.8 (an old red giant).
    r1_rsun : float
        Primary radius [Rsun]; default 10 (a red giant). Orbits whose periastron separation would
        make the giant overflow its Roche lobe (R1 >= r_L) are rejected.

    Notes
    -----
    Orientation: cos i ~ Uniform(-1, 1) (isotropic), argument of periastron
    omega ~ Uniform(0, 2 pi), mean anomaly at t = 0 ~ Uniform(0, 2 pi) (random phase).

    References
    ----------
    Raghavan D. et al. 2010, ApJS 190, 1; Duquennoy A. & Mayor M. 1991, A&A 248, 485;
    Eggleton P. P. 1983, ApJ 268, 368.
    """

    log_period_mean: float = 5.03
    log_period_sigma: float = 2.28
    q_min: float = 0.1
    q_max: float = 1.0
    p_circular_days: float = 12.0
    e_max: float = 0.9
    m1_msun: float = 0.8
    r1_rsun: float = 10.0

    @classmethod
    def duquennoy_mayor91(cls, **changes):
        """Periods log10(P/day) ~ N(4.8, 2.3) (Duquennoy & Mayor 1991, A&A 248, 485)."""
        return cls(log_period_mean=4.8, log_period_sigma=2.3, **changes)

    def clone(self, **changes):
        """A copy with some fields changed."""
        return dataclasses.replace(self, **changes)

    def to_dict(self):
        return dataclasses.asdict(self)


@dataclasses.dataclass(frozen=True)
class Orbits:
    """A sample of binary orbits (numpy arrays of equal length).

    Attributes: ``period_days`` [day], ``m1``, ``m2`` [Msun], ``e``, ``sin_i``, ``omega`` [rad]
    (argument of periastron of the primary), ``mean_anomaly0`` [rad] (mean anomaly at t = 0).
    """

    period_days: np.ndarray
    m1: np.ndarray
    m2: np.ndarray
    e: np.ndarray
    sin_i: np.ndarray
    omega: np.ndarray
    mean_anomaly0: np.ndarray

    def __len__(self):
        return len(self.period_days)

    def take(self, index):
        """The orbits selected by ``index`` (integer array or boolean mask), in that order."""
        return Orbits(*(getattr(self, f.name)[index] for f in dataclasses.fields(Orbits)))

    @property
    def semi_major_axis_rsun(self):
        """Relative-orbit semi-major axis a = A_UNIT (m_tot)^(1/3) P^(2/3) [Rsun] (Kepler III)."""
        return A_UNIT_RSUN * (self.m1 + self.m2) ** (1 / 3) * self.period_days ** (2 / 3)

    @property
    def k_kms(self):
        """Velocity semi-amplitude of the primary K [km/s].

        K = (2 pi G / P)^(1/3) m2 sin i / (m_tot^(2/3) sqrt(1 - e^2))
          = 212.9 km/s (m2/Msun) (P/day)^(-1/3) (m_tot/Msun)^(-2/3) sin i / sqrt(1 - e^2).
        """
        m_tot = self.m1 + self.m2
        return (
            K_UNIT_KMS
            * self.m2
            * self.period_days ** (-1 / 3)
            * m_tot ** (-2 / 3)
            * self.sin_i
            / np.sqrt(1.0 - self.e**2)
        )


def roche_lobe_fraction(mass_ratio):
    """Eggleton (1983) Roche-lobe radius in units of the separation, r_L / a.

    Parameters
    ----------
    mass_ratio : array_like
        Q = m_star / m_companion for the star whose lobe is wanted.

    Notes
    -----
    r_L / a = 0.49 Q^(2/3) / (0.6 Q^(2/3) + ln(1 + Q^(1/3))), accurate to better than 1 % for all Q
    (Eggleton 1983, ApJ 268, 368, eq. 2). Here a is the periastron separation a (1 - e), the
    conservative choice for eccentric orbits.
    """
    q23 = np.asarray(mass_ratio, dtype=float) ** (2 / 3)
    return 0.49 * q23 / (0.6 * q23 + np.log1p(np.cbrt(mass_ratio)))


def _draw(pop, n, rng):
    log_p = rng.normal(pop.log_period_mean, pop.log_period_sigma, n)
    period = 10.0**log_p
    q = rng.uniform(pop.q_min, pop.q_max, n)
    m1 = np.full(n, float(pop.m1_msun))
    e = np.where(period < pop.p_circular_days, 0.0, rng.uniform(0.0, pop.e_max, n))
    cos_i = rng.uniform(-1.0, 1.0, n)
    omega = rng.uniform(0.0, 2 * np.pi, n)
    mean0 = rng.uniform(0.0, 2 * np.pi, n)
    return Orbits(period, m1, q * m1, e, np.sqrt(1.0 - cos_i**2), omega, mean0)


def _roche_ok(pop, orb):
    a_peri = orb.semi_major_axis_rsun * (1.0 - orb.e)
    return pop.r1_rsun < roche_lobe_fraction(orb.m1 / orb.m2) * a_peri


def sample_orbits(pop, n, rng):
    """Draw ``n`` orbits from ``pop`` that pass the Roche-lobe criterion.

    Parameters
    ----------
    pop : BinaryPopulation
    n : int
        Number of accepted orbits.
    rng : numpy.random.Generator
        Seeded generator (the sample is reproducible given its state).

    Returns
    -------
    Orbits

    Notes
    -----
    Orbits are drawn jointly from the population and rejected if the giant would fill its Roche
    lobe at periastron: kept iff R1 < r_L(Q = m1/m2) a (1 - e) (Eggleton 1983).
    """
    parts, have = [], 0
    while have < n:
        need = n - have
        orb = _draw(pop, int(1.25 * need) + 64, rng)
        keep = _roche_ok(pop, orb)
        parts.append(orb.take(keep))
        have += int(keep.sum())
    return Orbits(
        *(
            np.concatenate([getattr(p, f.name) for p in parts])[:n]
            for f in dataclasses.fields(Orbits)
        )
    )
