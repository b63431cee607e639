"""Dark profiles whose mass needs a quadrature or a special function: Zhao and Einasto.

See :mod:`halo.physics.dark` for the methods every profile provides.
"""

import math

import jax
import jax.numpy as jnp
import numpy as np
from jax.scipy.special import gammainc, gammaln

from halo.core.numerics import gauss_legendre, safe_positive
from halo.core.pytree import pytree, static
from halo.physics.dark_base import FOUR_PI, DarkProfile

__all__ = ["Zhao", "Einasto"]

# ---------------------------------------------------------------------------------------- Zhao

_ZHAO_EPS = 0.02  # inner series used where t^alpha < _ZHAO_EPS
_ZHAO_SPLIT = 4.0  # panels in alpha ln t: [ln 0.02, 0], [0, 4], [4, alpha ln x]
_ZHAO_TERMS = 16  # terms of that series: truncation error ~C(p + 15, 16) 0.02^16 < 1e-19 (p <= 14)
_ZHAO_CUMSUM = np.triu(np.ones((_ZHAO_TERMS, _ZHAO_TERMS)), k=1)  # (v @ M)_k = sum_{j<k} v_j
_ZHAO_SIGNS = (-1.0) ** np.arange(_ZHAO_TERMS)


def _zhao_mu(x, alpha, beta, gamma, order):
    """Int_0^x t^(2-gamma) (1 + t^alpha)^(-(beta-gamma)/alpha) dt for x > 0.

    Series below t_0, Gauss-Legendre in ln t above: see :class:`Zhao` (Notes) for the accuracy.
    """
    x, alpha, beta, gamma = (v[..., None] for v in jnp.broadcast_arrays(x, alpha, beta, gamma))
    a = 3.0 - gamma
    p = (beta - gamma) / alpha
    ln_x = jnp.log(x)
    u_lo = jnp.minimum(ln_x, math.log(_ZHAO_EPS) / alpha)

    # inner piece, t < t_0 = e^u_lo: the binomial series of (1 + t^alpha)^-p integrated term by
    # term, sum_k binom(-p, k) t_0^(a + alpha k) / (a + alpha k); |binom(-p, k)| = prod_{j<k}
    # (p + j) / (j + 1), its log as a matrix product (cheap to differentiate and to compile)
    j = np.arange(_ZHAO_TERMS)
    ln_c = jnp.log((p + j) / (j + 1.0)) @ _ZHAO_CUMSUM
    expo = a + alpha * j
    inner = jnp.sum(_ZHAO_SIGNS * jnp.exp(ln_c + expo * u_lo) / expo, axis=-1)

    # outer piece, Gauss-Legendre on three panels in u = ln t: [u_lo, 0], [0, 4 / alpha],
    # [4 / alpha, ln x] (each clipped to [u_lo, ln x]). The integrand's complex poles sit at
    # Re u = 0, Im u = +-pi / alpha: at panel ends they slow Gauss-Legendre down the least.
    edges = jnp.concatenate(
        [u_lo, jnp.clip(0.0, u_lo, ln_x), jnp.clip(_ZHAO_SPLIT / alpha, u_lo, ln_x), ln_x], axis=-1
    )
    nodes, weights = gauss_legendre(order)
    half = 0.5 * (edges[..., 1:] - edges[..., :-1])
    u = (0.5 * (edges[..., 1:] + edges[..., :-1]))[..., None] + half[..., None] * nodes
    ln_h = a[..., None] * u - p[..., None] * jnp.logaddexp(0.0, alpha[..., None] * u)
    outer = jnp.sum(half * jnp.sum(weights * jnp.exp(ln_h), axis=-1), axis=-1)
    return inner + outer


@pytree
class Zhao(DarkProfile):
    """Zhao (1996) (alpha, beta, gamma) double power law, optionally truncated at ``r_t``.

    Parameters
    ----------
    rho_s : scale density [Msun kpc^-3]
    r_s : scale radius [kpc]
    alpha : sharpness of the transition (> 0)
    beta : outer log slope (> 3 for a finite total mass)
    gamma : inner log slope (< 3)
    r_t : truncation radius [kpc] (inf: none)
    order : Gauss-Legendre nodes per panel (three panels) of the mass integral (static; 24)

    Notes
    -----
    rho = rho_s / (x^gamma (1 + x^alpha)^((beta - gamma) / alpha)), x = r / r_s;
    d ln rho / d ln r = -gamma - (beta - gamma) x^alpha / (1 + x^alpha);
    M(<r) = 4 pi rho_s r_s^3 Int_0^x t^(2-gamma) (1 + t^alpha)^(-p) dt, p = (beta - gamma) / alpha
    (> 0), which is 4 pi rho_s r_s^3 x^(3-gamma) / (3-gamma)
    2F1((3-gamma)/alpha, p; (3-gamma+alpha)/alpha; -x^alpha).

    JAX has no gradient of the incomplete beta function in its shape parameters, so the mass is a
    fixed-order quadrature, differentiable in every parameter:

    - below t_0 = min(x, 0.02^(1/alpha)) the binomial series of (1 + t^alpha)^-p is integrated
      term by term (16 terms; truncation < 1e-19 relative for p <= 14);
    - from t_0 to x the integrand in u = ln t, exp((3-gamma) u - p ln(1 + e^(alpha u))), is analytic
      in the strip |Im u| < pi / alpha; it is integrated by ``order``-point Gauss-Legendre rules on
      three panels split at alpha u = 0 and alpha u = 4 (the poles at Re u = 0 then sit at panel
      ends, where they slow the rule down least).

    Accuracy, measured against mpmath's hyp2f1 (30 digits) for gamma in {0, 0.5, 1, 1.5},
    alpha in {0.5, 1, 2, 3}, beta in {3, 4, 5, 7}: max relative error over x in [1e-4, 1e3]
    4e-5 (order 8), 4e-8 (12), 1e-11 (16), 1e-14 (20), 7e-15 (24, default); over x up to 1e6,
    4e-9 (16), 2e-11 (20), 5e-14 (24). Derivatives in alpha, beta, gamma: < 1e-14 relative
    (random points in the same ranges). Zhao(alpha=1, beta=3, gamma=1) is the NFW profile.

    References
    ----------
    Zhao 1996, MNRAS 278, 488.
    """

    #: ``beta`` is the anisotropy everywhere at the interface, so the outer slope is ``beta_out``
    shape_parameters = ("alpha", "beta_out", "gamma", "r_t")
    field_names = {"beta_out": "beta"}
    positive = ("alpha", "r_t")

    rho_s: float
    r_s: float
    alpha: float
    beta: float
    gamma: float
    r_t: float = jnp.inf
    order: int = static(24)

    def density(self, r):
        ok, rs = safe_positive(r)
        ln_x = jnp.log(rs / self.r_s)
        ln_rho = -self.gamma * ln_x - (self.beta - self.gamma) / self.alpha * jnp.logaddexp(
            0.0, self.alpha * ln_x
        )
        rho = self.rho_s * jnp.exp(ln_rho)
        rho_0 = jnp.where(self.gamma > 0.0, jnp.inf, self.rho_s)
        return jnp.where(r <= self.r_t, jnp.where(ok, rho, rho_0), 0.0)

    def mass(self, r):
        ok, rs = safe_positive(jnp.minimum(r, self.r_t))
        mu = _zhao_mu(rs / self.r_s, self.alpha, self.beta, self.gamma, self.order)
        return jnp.where(ok, FOUR_PI * self.rho_s * self.r_s**3 * mu, 0.0)

    def log_slope(self, r):
        ok, rs = safe_positive(r)
        sig = jax.nn.sigmoid(self.alpha * jnp.log(rs / self.r_s))
        s = -self.gamma - (self.beta - self.gamma) * jnp.where(ok, sig, 0.0)
        return jnp.where(r <= self.r_t, s, -jnp.inf)


# ------------------------------------------------------------------------------------- Einasto


@pytree
class Einasto(DarkProfile):
    """Einasto (1965) profile as used for haloes by Navarro et al. (2004), optionally truncated.

    Parameters
    ----------
    rho_s : density at r_s [Msun kpc^-3]
    r_s : radius where the log slope is -2 (r_-2) [kpc]
    alpha : shape parameter (> 0; ~0.17 for CDM haloes)
    r_t : truncation radius [kpc] (inf: none)

    Notes
    -----
    rho = rho_s exp(-(2 / alpha)((r / r_s)^alpha - 1)); d ln rho / d ln r = -2 (r / r_s)^alpha;
    M(<r) = 4 pi rho_s r_s^3 e^(2/alpha) (alpha/2)^(3/alpha) / alpha
    * gamma_l(3/alpha, (2/alpha) x^alpha), with gamma_l the lower incomplete gamma function
    (Gamma(a) P(a, y): jax.scipy gammainc, which JAX differentiates in a too). Measured against
    mpmath for alpha in [0.08, 2], x in [1e-4, 1e3]: relative error < 2e-14 in M, < 1e-12 in
    dM / d alpha.

    References
    ----------
    Einasto 1965, Trudy Astrofiz. Inst. Alma-Ata 5, 87; Navarro et al. 2004, MNRAS 349, 1039;
    Cardone, Piedipalumbo & Tortora 2005, MNRAS 358, 1325 (mass).
    """

    shape_parameters = ("alpha", "r_t")
    positive = ("alpha", "r_t")

    rho_s: float
    r_s: float
    alpha: float
    r_t: float = jnp.inf

    def density(self, r):
        ok, rs = safe_positive(r)
        xa = jnp.where(ok, (rs / self.r_s) ** self.alpha, 0.0)
        rho = self.rho_s * jnp.exp(-2.0 / self.alpha * (xa - 1.0))
        return jnp.where(r <= self.r_t, rho, 0.0)

    def mass(self, r):
        ok, rs = safe_positive(jnp.minimum(r, self.r_t))
        x = rs / self.r_s
        a = 3.0 / self.alpha
        y = 2.0 / self.alpha * x**self.alpha
        ln_norm = (
            2.0 / self.alpha + a * jnp.log(0.5 * self.alpha) + gammaln(a) - jnp.log(self.alpha)
        )
        m = FOUR_PI * self.rho_s * self.r_s**3 * jnp.exp(ln_norm) * gammainc(a, y)
        return jnp.where(ok, m, 0.0)

    def log_slope(self, r):
        ok, rs = safe_positive(r)
        s = jnp.where(ok, -2.0 * (rs / self.r_s) ** self.alpha, 0.0)
        return jnp.where(r <= self.r_t, s, -jnp.inf)
