"""Dark profiles with closed-form masses: NFW, Burkert, core-NFW (see :mod:`halo.physics.dark`)."""

import jax.numpy as jnp
import numpy as np

from halo.core.numerics import safe_positive
from halo.core.pytree import pytree
from halo.physics.cosmology import r200_from_m200, rho_crit
from halo.physics.dark_base import FOUR_PI, DarkProfile

__all__ = ["NFW", "Burkert", "CoreNFW"]

# ----------------------------------------------------------------------------------------- NFW

# mu(x) = ln(1 + x) - x / (1 + x) = sum_{k>=2} (-1)^k (k - 1) / k x^k, used for x < 0.1
_NFW_SERIES = np.array([0.0, 0.0] + [(-1.0) ** k * (k - 1.0) / k for k in range(2, 17)])[::-1]


def _nfw_mu(x):
    """ln(1 + x) - x / (1 + x), relative error < 1e-14 for all x >= 0 (series below 0.1)."""
    small = x < 0.1
    x_lo, x_hi = jnp.where(small, x, 0.0), jnp.where(small, 1.0, x)  # double where
    return jnp.where(small, jnp.polyval(_NFW_SERIES, x_lo), jnp.log1p(x_hi) - x_hi / (1.0 + x_hi))


@pytree
class NFW(DarkProfile):
    """Navarro, Frenk & White (1996) profile, optionally truncated at ``r_t``.

    Parameters
    ----------
    rho_s : scale density [Msun kpc^-3]
    r_s : scale radius [kpc]
    r_t : truncation radius [kpc] (inf: none)

    Notes
    -----
    rho = rho_s / (x (1 + x)^2), x = r / r_s;  M(<r) = 4 pi rho_s r_s^3 [ln(1 + x) - x / (1 + x)];
    d ln rho / d ln r = -1 - 2 x / (1 + x). With a finite ``r_t`` the density is zero beyond r_t and
    the mass constant there. The mass bracket uses its Taylor series below x = 0.1 (16 terms):
    relative error < 1e-14 everywhere. ``from_m200_c200`` is the closed form
    rho_s = (200 / 3) rho_c c^3 / [ln(1 + c) - c / (1 + c)].

    References
    ----------
    Navarro, Frenk & White 1996, ApJ 462, 563; 1997, ApJ 490, 493.
    """

    rho_s: float
    r_s: float
    r_t: float = jnp.inf

    @classmethod
    def from_m200_c200(
        cls, m200, c200, cosmology=None, z=0.0, *, rho_c=None, delta=200.0, r_t=jnp.inf
    ):
        """See :meth:`DarkProfile.from_m200_c200`; here in closed form,
        rho_s = (delta / 3) rho_c c^3 / [ln(1 + c') - c' / (1 + c')], c' = min(r200, r_t) / r_s
        (Navarro, Frenk & White 1997, ApJ 490, 493)."""
        rho_c = rho_crit(cosmology, z) if rho_c is None else rho_c
        r200 = r200_from_m200(m200, rho_c, delta)
        r_s = r200 / c200
        rho_s = delta / 3.0 * rho_c * c200**3 / _nfw_mu(jnp.minimum(r200, r_t) / r_s)
        return cls(rho_s=rho_s, r_s=r_s, r_t=r_t)

    def density(self, r):
        x = r / self.r_s
        return jnp.where(r <= self.r_t, self.rho_s / (x * (1.0 + x) ** 2), 0.0)

    def mass(self, r):
        x = jnp.minimum(r, self.r_t) / self.r_s
        return FOUR_PI * self.rho_s * self.r_s**3 * _nfw_mu(x)

    def log_slope(self, r):
        x = r / self.r_s
        return jnp.where(r <= self.r_t, -1.0 - 2.0 * x / (1.0 + x), -jnp.inf)


# ------------------------------------------------------------------------------------- Burkert


def _burkert_mu(x):
    """Int_0^x t^2 / ((1 + t)(1 + t^2)) dt, relative error < 1e-13 (series below x = 0.1)."""
    small = x < 0.1
    xs = jnp.where(small, 1.0, x)
    big = 0.25 * (2.0 * jnp.log1p(xs) + jnp.log1p(xs**2) - 2.0 * jnp.arctan(xs))
    # 1 / ((1 + t)(1 + t^2)) = (1 - t) / (1 - t^4): sum_m x^(4m+3) / (4m+3) - x^(4m+4) / (4m+4)
    x = jnp.where(small, x, 0.0)  # double where
    x4 = x**4
    series = x**3 * (
        1.0 / 3.0
        - x / 4.0
        + x4 * (1.0 / 7.0 - x / 8.0 + x4 * (1.0 / 11.0 - x / 12.0 + x4 * (1.0 / 15.0 - x / 16.0)))
    )
    return jnp.where(small, series, big)


@pytree
class Burkert(DarkProfile):
    """Burkert (1995) cored profile, optionally truncated at ``r_t``.

    Parameters
    ----------
    rho_s : central density [Msun kpc^-3]
    r_s : core radius [kpc]
    r_t : truncation radius [kpc] (inf: none)

    Notes
    -----
    rho = rho_s / ((1 + x)(1 + x^2)), x = r / r_s;
    M(<r) = pi rho_s r_s^3 [ln((1 + x)^2 (1 + x^2)) - 2 arctan x] (Mori & Burkert 2000);
    d ln rho / d ln r = -x / (1 + x) - 2 x^2 / (1 + x^2). Below x = 0.1 the mass uses the series
    4 pi rho_s r_s^3 sum_m [x^(4m+3) / (4m+3) - x^(4m+4) / (4m+4)] (m <= 3); relative error < 1e-13.

    References
    ----------
    Burkert 1995, ApJ 447, L25; Mori & Burkert 2000, ApJ 538, 559.
    """

    rho_s: float
    r_s: float
    r_t: float = jnp.inf

    def density(self, r):
        x = r / self.r_s
        return jnp.where(r <= self.r_t, self.rho_s / ((1.0 + x) * (1.0 + x**2)), 0.0)

    def mass(self, r):
        x = jnp.minimum(r, self.r_t) / self.r_s
        return FOUR_PI * self.rho_s * self.r_s**3 * _burkert_mu(x)

    def log_slope(self, r):
        x = r / self.r_s
        return jnp.where(r <= self.r_t, -x / (1.0 + x) - 2.0 * x**2 / (1.0 + x**2), -jnp.inf)


# ------------------------------------------------------------------------------------ core-NFW


def _sech2_and_slope(y):
    """sech^2 y and d ln tanh y / d ln y = 2 y / sinh(2 y), overflow-free for large y > 0."""
    e2 = jnp.exp(-2.0 * y)
    sech2 = 4.0 * e2 / (1.0 + e2) ** 2
    slope = 4.0 * y * e2 / (-jnp.expm1(-4.0 * y))
    return sech2, slope


@pytree
class CoreNFW(DarkProfile):
    """Core-NFW profile of Read, Agertz & Collins (2016), optionally truncated at ``r_t``.

    Parameters
    ----------
    rho_s : NFW scale density [Msun kpc^-3]
    r_s : NFW scale radius [kpc]
    r_c : core radius [kpc]
    n : core strength in [0, 1] (0: NFW, 1: fully cored)
    r_t : truncation radius [kpc] (inf: none)

    Notes
    -----
    M(<r) = M_NFW(<r) f^n, f = tanh(r / r_c) (eqs. 16-17);
    rho = f^n rho_NFW + n f^(n-1) (1 - f^2) M_NFW / (4 pi r^2 r_c) (eq. 18);
    d ln rho / d ln r = [A (n s_f + s_N) + B ((n - 1) s_f - 2 y f + 4 pi r^3 rho_NFW / M_NFW - 2)]
    / (A + B), with A and B the two terms of rho, y = r / r_c, s_f = 2 y / sinh 2y and
    s_N = -1 - 2 x / (1 + x) (derivative of eq. 18). Closed forms: relative error ~1e-14
    (against mpmath). ``from_m200_c200`` normalises the cored profile, M_coreNFW(<r200) = M200;
    Read et al. quote M200 of the underlying NFW halo, larger by tanh(r200 / r_c)^-n (< 7e-4
    relative for r_c < r200 / 4).

    References
    ----------
    Read, Agertz & Collins 2016, MNRAS 459, 2573.
    """

    shape_parameters = ("r_c", "n", "r_t")
    positive = ("r_c", "r_t")
    unit_interval = ("n",)

    rho_s: float
    r_s: float
    r_c: float
    n: float
    r_t: float = jnp.inf

    def _terms(self, r):
        x = r / self.r_s
        y = r / self.r_c
        f = jnp.tanh(y)
        fn = f**self.n
        m_nfw = FOUR_PI * self.rho_s * self.r_s**3 * _nfw_mu(x)
        rho_nfw = self.rho_s / (x * (1.0 + x) ** 2)
        sech2, s_f = _sech2_and_slope(y)
        a = fn * rho_nfw
        b = self.n * fn / f * sech2 * m_nfw / (FOUR_PI * r**2 * self.r_c)
        return x, y, f, m_nfw, rho_nfw, s_f, a, b

    def density(self, r):
        ok, rs = safe_positive(r)
        _, _, _, _, _, _, a, b = self._terms(rs)
        # r -> 0: rho ~ r^(n-1); for n = 1 the limit is 1.5 rho_s r_s / r_c
        rho_0 = jnp.where(self.n >= 1.0, 1.5 * self.rho_s * self.r_s / self.r_c, jnp.inf)
        return jnp.where(r <= self.r_t, jnp.where(ok, a + b, rho_0), 0.0)

    def mass(self, r):
        ok, rr = safe_positive(jnp.minimum(r, self.r_t))
        m = FOUR_PI * self.rho_s * self.r_s**3 * _nfw_mu(rr / self.r_s)
        return jnp.where(ok, m * jnp.tanh(rr / self.r_c) ** self.n, 0.0)

    def log_slope(self, r):
        ok, rs = safe_positive(r)
        x, y, f, m_nfw, rho_nfw, s_f, a, b = self._terms(rs)
        s_n = -1.0 - 2.0 * x / (1.0 + x)
        dlnm = FOUR_PI * rs**3 * rho_nfw / m_nfw
        s = (a * (self.n * s_f + s_n) + b * ((self.n - 1.0) * s_f - 2.0 * y * f + dlnm - 2.0)) / (
            a + b
        )
        # r -> 0: rho ~ r^(n-1)
        return jnp.where(r <= self.r_t, jnp.where(ok, s, self.n - 1.0), -jnp.inf)
