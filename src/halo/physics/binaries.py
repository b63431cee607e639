"""Binary-star orbital motion: an orbit population and its line-of-sight velocity distribution.

A star in a binary moves about the binary's centre of mass, which adds a velocity ``v_b`` to the
systemic motion of the star in the satellite. This module provides

- ``BinaryPopulation``: the (frozen) parameters of the orbit population, with documented defaults;
- ``sample_orbits(pop, n, rng)``: a seeded Monte Carlo sample of orbits (numpy), Roche-lobe
  rejection included;
- ``los_velocity(orbits, t_days)``: the primary's line-of-sight velocity [km/s] at time t, so that
  one orbit can be observed at several epochs;
- ``fit_mixture(pop, n, seed)`` / ``load_mixture()``: a scale mixture of zero-mean Gaussians,
  P_b(v) = sum_k w_k N(v | 0, s_k^2), fitted to the single-epoch velocity distribution and cached
  as package data (``halo/data/binary_mixture.json``);
- ``log_convolved_density(v, mu, var, scales, weights)``: the analytic convolution of a Gaussian
  with P_b, a pure JAX function for the velocity likelihood.

Regenerate the cached mixture with ``python -m halo.physics.binaries --regenerate`` (options ``--n`` and
``--seed``; defaults reproduce the shipped file).

The Monte Carlo is numpy precomputation (run once), not traced physics; only
``log_convolved_density`` is meant for jit/grad.
"""

import argparse
import dataclasses
import json
from importlib import resources
from pathlib import Path

import jax.numpy as jnp
import numpy as np
from jax.scipy.special import logsumexp

__all__ = [
    "BinaryPopulation",
    "Orbits",
    "sample_orbits",
    "los_velocity",
    "solve_kepler",
    "roche_lobe_fraction",
    "BinaryMixture",
    "fit_mixture",
    "load_mixture",
    "log_convolved_density",
]

#: (2 pi G Msun / 1 day)^(1/3) [km/s]: K = K_UNIT (m2/Msun) (P/day)^(-1/3) (m_tot/Msun)^(-2/3)
#: sin i / sqrt(1 - e^2).  Computed from astropy.constants (CODATA 2018 G, IAU 2015 Msun);
#: the test suite recomputes it.
K_UNIT_KMS = 212.908297

#: (G Msun (1 day)^2 / 4 pi^2)^(1/3) [Rsun]: Kepler's third law a = A_UNIT (m_tot/Msun)^(1/3)
#: (P/day)^(2/3).  Computed from astropy.constants; the test suite recomputes it.
A_UNIT_RSUN = 4.2082783

#: default Monte Carlo size and seed of the shipped mixture.
DEFAULT_N = 2_000_000
DEFAULT_SEED = 20100722

_DATA_FILE = "data/binary_mixture.json"


@dataclasses.dataclass(frozen=True)
class BinaryPopulation:
    """Orbit population of binaries whose primary is the observed (red giant) star.

    Parameters
    ----------
    log_period_mean, log_period_sigma : float
        log10(P / day) ~ Normal(mean, sigma). Defaults 5.03, 2.28 (Raghavan et al. 2010, solar-type
        field binaries); ``BinaryPopulation.duquennoy_mayor_1991()`` gives 4.8, 2.3.
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
    def duquennoy_mayor_1991(cls, **changes):
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


# --------------------------------------------------------------------------- scale mixture


@dataclasses.dataclass(frozen=True)
class BinaryMixture:
    """P_b(v) = sum_k weights[k] N(v | 0, scales[k]^2), with how it was made.

    Attributes: ``scales`` [km/s], ``weights`` (sum to 1), ``population`` (BinaryPopulation),
    ``n_samples``, ``seed``, ``log_bins`` (histogram resolution used by the fit).
    """

    scales: np.ndarray
    weights: np.ndarray
    population: BinaryPopulation
    n_samples: int
    seed: int
    log_bins: int

    def pdf(self, v):
        """P_b(v) [(km/s)^-1]."""
        v = np.asarray(v, dtype=float)[..., None]
        s = self.scales
        return np.sum(self.weights * np.exp(-0.5 * (v / s) ** 2) / (np.sqrt(2 * np.pi) * s), -1)

    def cdf_abs(self, v):
        """P(|v_b| < v) for v >= 0."""
        from scipy.special import erf

        v = np.asarray(v, dtype=float)[..., None]
        return np.sum(self.weights * erf(v / (np.sqrt(2.0) * self.scales)), -1)

    def to_json(self):
        return {
            "description": "scale mixture of zero-mean Gaussians for the single-epoch binary "
            "line-of-sight velocity: P_b(v) = sum_k w_k N(v | 0, s_k^2); regenerate with "
            "`python -m halo.physics.binaries --regenerate`",
            "scales_kms": [float(s) for s in self.scales],
            "weights": [float(f"{w:.10g}") if w > 1e-15 else 0.0 for w in self.weights],
            "population": self.population.to_dict(),
            "n_samples": int(self.n_samples),
            "seed": int(self.seed),
            "log_bins": int(self.log_bins),
        }

    @classmethod
    def from_json(cls, d):
        w = np.asarray(d["weights"], dtype=float)
        return cls(
            scales=np.asarray(d["scales_kms"], dtype=float),
            weights=w / w.sum(),
            population=BinaryPopulation(**d["population"]),
            n_samples=int(d["n_samples"]),
            seed=int(d["seed"]),
            log_bins=int(d["log_bins"]),
        )


def default_scales(n_scales=16, s_min=0.01, s_max=100.0):
    """Log-spaced mixture scales [km/s]."""
    return np.geomspace(s_min, s_max, n_scales)


def fit_mixture(
    pop=None,
    n=DEFAULT_N,
    seed=DEFAULT_SEED,
    scales=None,
    log_bins=4000,
    max_iter=20000,
    tol=1e-12,
):
    """Fit mixture weights (fixed scales) by EM to a Monte Carlo single-epoch velocity sample.

    Parameters
    ----------
    pop : BinaryPopulation, optional
        Default ``BinaryPopulation()``.
    n : int
        Monte Carlo orbits (default 2e6).
    seed : int
        Seed of ``numpy.random.default_rng``.
    scales : array_like, optional
        Fixed component scales [km/s]; default ``default_scales()`` (16 from 0.01 to 100 km/s).
    log_bins : int
        The sample's |v| is histogrammed in ``log_bins`` log-spaced bins spanning its range and
        each bin is represented by the mean |v| of its members (weighted EM). With 4000 bins the
        bins are < 0.003 dex wide, far below the ~0.27 dex spacing of the scales.
    max_iter, tol : int, float
        EM stops when the mean log-likelihood per star changes by less than ``tol``. Neighbouring
        weights are nearly degenerate and converge slowly, but the distribution itself converges
        fast: its CDF changes by < 1e-3 between 1000 iterations and convergence (tested).

    Returns
    -------
    BinaryMixture

    Notes
    -----
    EM for weights only: r_ik = w_k N(v_i|0,s_k^2) / sum_j w_j N(v_i|0,s_j^2); w_k <- mean_i r_ik
    (Dempster, Laird & Rubin 1977, JRSS B 39, 1). The likelihood is concave in w, so EM converges
    to the global maximum. Accuracy (tests): KS distance of |v| against an independent sample of
    2e5 orbits < 0.01.
    """
    pop = BinaryPopulation() if pop is None else pop
    scales = default_scales() if scales is None else np.asarray(scales, dtype=float)
    rng = np.random.default_rng(seed)
    v = np.abs(los_velocity(sample_orbits(pop, n, rng)))
    v = v[v > 0]
    lv = np.log(v)
    edges = np.linspace(lv.min(), lv.max(), log_bins + 1)
    idx = np.clip(np.searchsorted(edges, lv, side="right") - 1, 0, log_bins - 1)
    counts = np.bincount(idx, minlength=log_bins).astype(float)
    sums = np.bincount(idx, weights=v, minlength=log_bins)
    used = counts > 0
    x, c = sums[used] / counts[used], counts[used] / counts[used].sum()
    # component densities of |v| (half-normal, the factor 2 cancels in EM)
    like = np.exp(-0.5 * (x[:, None] / scales) ** 2) / scales
    w = np.full(len(scales), 1.0 / len(scales))
    old = -np.inf
    for _ in range(max_iter):
        mix = like @ w
        ll = float(c @ np.log(mix))
        w = w * (like.T @ (c / mix))
        w /= w.sum()
        if abs(ll - old) < tol:
            break
        old = ll
    return BinaryMixture(scales, w, pop, int(n), int(seed), int(log_bins))


def load_mixture():
    """The cached mixture shipped as ``halo/data/binary_mixture.json``."""
    text = resources.files("halo").joinpath(_DATA_FILE).read_text(encoding="utf-8")
    return BinaryMixture.from_json(json.loads(text))


def log_convolved_density(v, mu, var, scales, weights):
    """log of Int N(v - v_b | mu, var) P_b(v_b) dv_b for the Gaussian scale mixture P_b (pure JAX).

    Parameters
    ----------
    v, mu : array_like
        Velocity and mean [km/s].
    var : array_like
        Gaussian variance [(km/s)^2] (e.g. sigma^2 + err^2).
    scales, weights : array_like
        Mixture components [km/s] and weights (last axis).

    Notes
    -----
    Exact: sum_k w_k N(v | mu, var + s_k^2) (Gaussians convolve by adding variances); evaluated
    with logsumexp, differentiable, works under jit and vmap.
    """
    v = jnp.asarray(v)[..., None]
    mu = jnp.asarray(mu)[..., None]
    tot = jnp.asarray(var)[..., None] + jnp.asarray(scales) ** 2
    logn = -0.5 * (v - mu) ** 2 / tot - 0.5 * jnp.log(2 * jnp.pi * tot)
    return logsumexp(logn, axis=-1, b=jnp.asarray(weights))


def _main(argv=None):
    parser = argparse.ArgumentParser(
        prog="python -m halo.physics.binaries",
        description="Binary-star velocity mixture: regenerate the cached package data.",
    )
    parser.add_argument("--regenerate", action="store_true", help="refit and write the JSON")
    parser.add_argument("--n", type=int, default=DEFAULT_N, help="Monte Carlo orbits")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help="random seed")
    parser.add_argument("--output", type=Path, default=None, help="output file (default: package)")
    args = parser.parse_args(argv)
    if not args.regenerate:
        parser.print_help()
        return 0
    mix = fit_mixture(n=args.n, seed=args.seed)
    out = args.output or Path(__file__).parents[1] / "data" / "binary_mixture.json"
    out.write_text(json.dumps(mix.to_json(), indent=1) + "\n", encoding="utf-8")
    print(f"wrote {out}")
    for s, w in zip(mix.scales, mix.weights, strict=True):
        print(f"  s = {s:9.4f} km/s   w = {w:.5f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(_main())
