"""Light (tracer) profiles, normalised to unit total luminosity.

Every profile gives, as pure JAX functions of its parameters (radii in kpc):

- ``surface_density(R)``  Sigma(R) [kpc^-2], with  Int 2 pi R Sigma dR = 1
- ``density(r)``          nu(r) [kpc^-3], with     Int 4 pi r^2 nu dr = 1
- ``enclosed_2d(R)``      fraction of the light inside projected radius R
- ``enclosed_3d(r)``      fraction of the light inside 3D radius r
- ``r_half_2d()``         projected half-light radius [kpc]
- ``r_half_3d()``         3D half-light radius [kpc]
- ``r_edge()``            radius beyond which nu = 0 [kpc] (inf when untruncated)

and a constructor ``from_r_half(r_half_2d, ...)`` from the projected half-light radius.
Radii may be arrays; parameters broadcast against them.
"""

import functools
import math

import jax
import jax.numpy as jnp
import numpy as np

from halo.core.pytree import pytree, static

__all__ = ["Plummer", "Exponential", "King", "LIGHT_PROFILES"]


def _finite(r):
    """(isfinite(r), r with infinities replaced by 0): keeps gradients finite at r = inf."""
    fin = jnp.isfinite(r)
    return fin, jnp.where(fin, r, 0.0)


@pytree
class Plummer:
    """Plummer (1911) sphere with scale radius ``a`` [kpc].

    Parameters
    ----------
    a : float
        Scale radius [kpc], equal to the projected half-light radius.

    Notes
    -----
    Sigma(R) = (1 / pi a^2) (1 + R^2/a^2)^-2;  nu(r) = (3 / 4 pi a^3) (1 + r^2/a^2)^-5/2;
    L(<R) = R^2 / (R^2 + a^2);  L(<r) = r^3 / (r^2 + a^2)^3/2;  R_e = a;
    r_1/2 = a / sqrt(2^(2/3) - 1) = 1.30477 a.  All closed forms (exact to rounding).

    References
    ----------
    Plummer H. C. 1911, MNRAS 71, 460; Dejonghe H. 1987, MNRAS 224, 13.
    """

    a: float

    @classmethod
    def from_r_half(cls, r_half_2d):
        return cls(a=r_half_2d)

    def surface_density(self, R):
        fin, R = _finite(R)
        x2 = (R / self.a) ** 2
        return jnp.where(fin, 1.0 / (jnp.pi * self.a**2) / (1.0 + x2) ** 2, 0.0)

    def density(self, r):
        fin, r = _finite(r)
        x2 = (r / self.a) ** 2
        return jnp.where(fin, 3.0 / (4.0 * jnp.pi * self.a**3) * (1.0 + x2) ** -2.5, 0.0)

    def enclosed_2d(self, R):
        fin, R = _finite(R)
        return jnp.where(fin, R**2 / (R**2 + self.a**2), 1.0)

    def enclosed_3d(self, r):
        fin, r = _finite(r)
        return jnp.where(fin, r**3 / (r**2 + self.a**2) ** 1.5, 1.0)

    def r_half_2d(self):
        return self.a

    def r_half_3d(self):
        return self.a / jnp.sqrt(2.0 ** (2.0 / 3.0) - 1.0)

    def r_edge(self):
        return jnp.inf


# ----------------------------------------------------------------------------- helpers


@functools.cache
def _gauss_legendre01(n):
    """Gauss-Legendre nodes and weights on [0, 1] (numpy constants, baked into traces)."""
    t, w = np.polynomial.legendre.leggauss(n)
    return 0.5 * (t + 1.0), 0.5 * w


def _gammainc_int(n, y):
    """Regularised lower incomplete gamma P(n, y) for integer n >= 1, y >= 0.

    Series y^n e^-y Sum_k y^k / (n + k)! for y < 1 (17 terms, relative error < 1e-16, no
    cancellation for small y), closed form 1 - e^-y Sum_{k<n} y^k / k! for y >= 1.
    """
    small = y < 1.0
    ys = jnp.where(small, y, 0.5)
    yb = jnp.where(small, 2.0, y)
    coef = np.array([1.0 / math.factorial(n + k) for k in range(17)])
    ser = ys**n * jnp.exp(-ys) * _power_series(coef, ys)
    poly = sum(yb**k / math.factorial(k) for k in range(n))
    big = 1.0 - jnp.exp(-yb) * poly
    return jnp.where(small, ser, big)


def _power_series(coef, y):
    """Sum_k coef[k] y^k as one vectorised op (keeps the compiled graph small).

    The k = 0 term is kept out of the power: d(y^0)/dy evaluates to 0 * inf = nan at y = 0.
    """
    k = np.arange(1, len(coef), dtype=float)
    return coef[0] + jnp.sum(coef[1:] * y[..., None] ** k, axis=-1)


def _bisect(f, lo, hi, target, n_iter):
    """Fixed-count bisection for f(x) = target with f increasing on [lo, hi] (no gradient)."""

    def body(_, bracket):
        a, b = bracket
        mid = 0.5 * (a + b)
        above = f(mid) > target
        return jnp.where(above, a, mid), jnp.where(above, mid, b)

    lo, hi = jax.lax.fori_loop(0, n_iter, body, (lo, hi))
    return 0.5 * (lo + hi)


#: bisection steps for the half-light solvers: bracket width / 2^60 is below double precision
_N_BISECT = 60


# ----------------------------------------------------------------------------- exponential

#: integrands exp(-x cosh t) are cut where x (cosh t - 1) = _CUT: neglected part < e^-40 ~ 4e-18
_CUT = 40.0
#: R_e / r_d, root of 1 - e^-x (1 + x) = 1/2 (mpmath, 40 digits: 1.678346990016660653...)
_EXP_RE_RD = 1.6783469900166605
#: r_1/2 / r_d, root of (2/pi) Int_0^x s^2 K0(s) ds = 1/2 (mpmath, 40 digits: 2.2235172864987924...)
_EXP_R3_RD = 2.2235172864987924


def _t_max(x):
    """Upper limit T with x (cosh T - 1) = _CUT, i.e. T = 2 asinh(sqrt(_CUT / 2x))."""
    return jax.lax.stop_gradient(2.0 * jnp.arcsinh(jnp.sqrt(0.5 * _CUT / x)))


def _k0(x, n_quad):
    """Modified Bessel function K0(x) for x > 0, differentiable (dK0/dx = -K1).

    K0(x) = Int_0^inf exp(-x cosh t) dt (Abramowitz & Stegun 1964, eq. 9.6.24), by ``n_quad``-point
    Gauss-Legendre on [0, T(x)], x (cosh T - 1) = 40, so the interval grows like ln(1/x) where the
    integrand is flat to large t. Relative error (vs scipy.special.k0, x in [1e-5, 50]):
    ~1e-5 at n_quad = 16, ~1e-10 at 32, < 1e-13 at 48.
    """
    nodes, weights = _gauss_legendre01(n_quad)
    T = _t_max(x)[..., None]
    t = T * nodes
    f = jnp.exp(-2.0 * x[..., None] * jnp.sinh(0.5 * t) ** 2)  # exp(-x (cosh t - 1))
    return jnp.exp(-x) * T[..., 0] * jnp.sum(weights * f, axis=-1)


def _sech3_tail(T):
    """Int_T^inf sech^3 t dt = (arctan u - u / (1 + u^2)) / 2, u = 1 / sinh T.

    For u < 0.1 the series Sum_{n>=1} (-1)^(n+1) 2n/(2n+1) u^(2n+1) (13 terms, relative error
    < 1e-26) replaces the cancelling difference.
    """
    u = 1.0 / jnp.sinh(T)
    small = u < 0.1
    us = jnp.where(small, u, 0.05)
    ub = jnp.where(small, 1.0, u)
    coef = np.array([(-1) ** (n + 1) * 2.0 * n / (2 * n + 1) for n in range(1, 14)])
    ser = us**3 * _power_series(coef, us**2)
    big = jnp.arctan(ub) - 1.0 / (ub + 1.0 / ub)
    return 0.5 * jnp.where(small, ser, big)


def _exp_enclosed_3d(x, n_quad):
    """(2/pi) Int_0^x s^2 K0(s) ds, the 3D light fraction of the exponential inside r = x r_d.

    Swapping the s and t integrals of K0 gives (4/pi) Int_0^inf P(3, x cosh t) sech^3 t dt with
    P(3, y) = 1 - e^-y (1 + y + y^2/2); Gauss-Legendre on [0, T(x)] as in `_k0`, and P = 1 beyond T
    (error < e^-40 (x + 40)^2 / 2) so the tail is Int_T^inf sech^3 in closed form.
    """
    nodes, weights = _gauss_legendre01(n_quad)
    T = _t_max(x)
    t = T[..., None] * nodes
    ch = jnp.cosh(t)
    f = _gammainc_int(3, x[..., None] * ch) / ch**3
    return 4.0 / jnp.pi * (T * jnp.sum(weights * f, axis=-1) + _sech3_tail(T))


@pytree
class Exponential:
    """Projected exponential (Sersic n = 1) profile with scale length ``r_d`` [kpc].

    Parameters
    ----------
    r_d : float
        Scale length [kpc].
    n_quad : int, static
        Gauss-Legendre order of the K0 and L(<r) integrals (default 48).

    Notes
    -----
    Sigma(R) = exp(-R/r_d) / (2 pi r_d^2);  L(<R) = 1 - e^-x (1 + x), x = R/r_d;
    R_e = 1.678346990016661 r_d.  Abel deprojection:
    nu(r) = -(1/pi) Int_r^inf dSigma/dR dR / sqrt(R^2 - r^2) = K0(r/r_d) / (2 pi^2 r_d^3),
    which integrates to 1 since Int_0^inf x^2 K0(x) dx = pi/2.  nu diverges like -ln r at the
    centre (density(0) = inf).  L(<r) = (2/pi) Int_0^{r/r_d} s^2 K0(s) ds is computed as
    (4/pi) Int_0^inf P(3, (r/r_d) cosh t) sech^3 t dt (K0 = Int_0^inf exp(-x cosh t) dt, integrals
    swapped, P the regularised incomplete gamma function); r_1/2 = 2.223517286498792 r_d
    = 1.324825736 R_e.

    Accuracy (n_quad = 48, r from 1e-5 r_d to 50 r_d): nu and L(<r) relative error < 1e-13
    (measured against scipy.special.k0 and scipy quad); ~1e-10 at n_quad = 32.

    References
    ----------
    Abramowitz M. & Stegun I. A. 1964, Handbook of Mathematical Functions, eq. 9.6.24 (K0).
    """

    r_d: float
    n_quad: int = static(48)

    @classmethod
    def from_r_half(cls, r_half_2d, n_quad=48):
        """From the projected half-light radius R_e [kpc]: r_d = R_e / 1.678346990016661."""
        return cls(r_d=r_half_2d / _EXP_RE_RD, n_quad=n_quad)

    def surface_density(self, R):
        fin, R = _finite(R)
        return jnp.where(fin, jnp.exp(-R / self.r_d), 0.0) / (2.0 * jnp.pi * self.r_d**2)

    def _x(self, r):
        """(0 < r < 800 r_d, r / r_d with values outside that range replaced by 1)."""
        ok = (r > 0.0) & (r < 800.0 * self.r_d)  # K0(800) underflows; 1 - L(<800 r_d) ~ e^-800
        return ok, jnp.where(ok, r, self.r_d) / self.r_d

    def density(self, r):
        ok, x = self._x(r)
        k0 = jnp.where(ok, _k0(x, self.n_quad), jnp.where(r > 0.0, 0.0, jnp.inf))
        return k0 / (2.0 * jnp.pi**2 * self.r_d**3)

    def enclosed_2d(self, R):
        ok, x = self._x(R)
        return jnp.where(ok, _gammainc_int(2, x), jnp.where(R > 0.0, 1.0, 0.0))

    def enclosed_3d(self, r):
        ok, x = self._x(r)
        return jnp.where(ok, _exp_enclosed_3d(x, self.n_quad), jnp.where(r > 0.0, 1.0, 0.0))

    def r_half_2d(self):
        return _EXP_RE_RD * self.r_d

    def r_half_3d(self):
        return _EXP_R3_RD * self.r_d

    def r_edge(self):
        return jnp.inf


# ----------------------------------------------------------------------------- King


#: (2n)!! / (2n + 1)!!, n = 1..22: the series of arcsin(w) / sqrt(1 - w^2) - w in powers of w
_KING_G_COEF = np.cumprod([(2.0 * n) / (2.0 * n + 1.0) for n in range(1, 23)])


def _king_g(w2, z2):
    """g = arccos(z)/z - sqrt(1 - z^2), from w2 = 1 - z^2 and z2 = z^2 (each free of cancellation).

    Near the tidal radius (w2 < 0.1) the series Sum_{n>=1} (2n)!!/(2n+1)!! w^(2n+1) of
    arcsin(w)/sqrt(1 - w^2) - w (22 terms, relative error < 1e-16) replaces the cancelling
    difference; g ~ 2 w^3 / 3 there, so nu and its gradients go smoothly to 0 at r_t.
    """
    small = w2 < 0.1
    ws = jnp.where(small, w2, 0.0)
    ser = ws**1.5 * _power_series(_KING_G_COEF, ws)
    w = jnp.sqrt(jnp.where(small, 0.5, w2))
    z = jnp.sqrt(jnp.where(small, 0.5, z2))
    big = jnp.arctan2(w, z) / z - w
    return jnp.where(small, ser, big)


def _king_norm(c):
    """D(c) = 1 / (pi r_c^2 k) = ln(1 + c^2) - 4 (v_t - 1)/v_t + c^2/v_t^2, v_t = sqrt(1 + c^2).

    King (1962), eq. 18 at R = r_t: unit total light.
    """
    c2 = c**2
    vt = jnp.sqrt(1.0 + c2)
    return jnp.log1p(c2) - 4.0 * (vt - 1.0) / vt + c2 / (1.0 + c2)


def _king_h(v, a):
    """L(<R) / (pi r_c^2 k) with v = sqrt(1 + R^2/r_c^2), a = 1/v_t (King 1962, eq. 18)."""
    return 2.0 * jnp.log(v) - 4.0 * a * (v - 1.0) + a**2 * (v**2 - 1.0)


def _king_v_half(c):
    """v_e = sqrt(1 + R_e^2/r_c^2) for concentration c: bisection, then one Newton step that
    carries the implicit-function gradient d v_e / d c = -(dh/dc) / (dh/dv)."""
    a = 1.0 / jnp.sqrt(1.0 + c**2)
    target = 0.5 * _king_norm(c)
    a0, t0 = jax.lax.stop_gradient(a), jax.lax.stop_gradient(target)
    v0 = _bisect(lambda v: _king_h(v, a0), jnp.ones_like(a0), 1.0 / a0, t0, _N_BISECT)
    v0 = jax.lax.stop_gradient(v0)
    dh = 2.0 / v0 * (1.0 - a0 * v0) ** 2
    return v0 - (_king_h(v0, a) - target) / dh


def _king_l3_integrand(phi, c):
    """dL/dphi of the 3D light inside r = r_c sinh(s_t sin phi), s_t = asinh(c) (see `King`)."""
    s_t = jnp.arcsinh(c)
    sh = jnp.sinh(s_t * jnp.sin(phi))  # r / r_c
    x = sh**2
    # 1 - z^2 = (c^2 - x) / (1 + c^2): its rounding error near r_t is ~eps |1 - z^2|^1/2 relative to
    # g ~ |1 - z^2|^3/2, a negligible absolute error in L
    w2 = jnp.maximum((c - sh) * (c + sh), 0.0) / (1.0 + c**2)
    z2 = (1.0 + x) / (1.0 + c**2)
    pref = 4.0 * s_t / (jnp.pi * _king_norm(c) * jnp.sqrt(1.0 + c**2))
    return pref * x / jnp.sqrt(1.0 + x) * _king_g(w2, z2) * jnp.cos(phi)


def _king_l3_phi(phi_r, c, n_quad, phi_extra=None):
    """3D light fraction inside phi_r (Gauss-Legendre in phi on [0, phi_r]).

    With ``phi_extra`` also returns the integrand there (one vectorised evaluation for both).
    """
    nodes, weights = _gauss_legendre01(n_quad)
    phi = phi_r[..., None] * nodes
    if phi_extra is not None:
        phi = jnp.concatenate([phi, phi_extra[..., None]], axis=-1)
    f = _king_l3_integrand(phi, c[..., None])
    lum = phi_r * jnp.sum(weights * f[..., :n_quad], axis=-1)
    return lum if phi_extra is None else (lum, f[..., n_quad])


@pytree
class King:
    """King (1962) profile with core radius ``r_c`` [kpc] and tidal radius ``r_t`` [kpc].

    Parameters
    ----------
    r_c, r_t : float
        Core and tidal (limiting) radius [kpc]; concentration c = r_t / r_c. The closed forms
        cancel for c < 1 (relative errors ~2e-13 at c = 0.5, rounding level for c >= 1.5).
    n_quad : int, static
        Gauss-Legendre order of the L(<r) integral (default 32).

    Notes
    -----
    Sigma(R) = k [(1 + R^2/r_c^2)^-1/2 - (1 + c^2)^-1/2]^2 for R < r_t, 0 beyond (eq. 14);
    L(<R) = pi r_c^2 k [ln(1 + x) - 4 (sqrt(1 + x) - 1)/sqrt(1 + c^2) + x/(1 + c^2)],
    x = R^2/r_c^2 (eq. 18); unit total light fixes k = 1 / (pi r_c^2 D), D = the bracket at x = c^2.
    Deprojection (eq. 27): nu(r) = k / (pi r_c (1 + c^2)^3/2 z^2) [arccos(z)/z - sqrt(1 - z^2)],
    z^2 = (1 + r^2/r_c^2) / (1 + c^2), 0 beyond r_t; nu ~ (r_t - r)^3/2 at the edge.

    nu is evaluated from 1 - z^2 = (r_t^2 - r^2) / (r_c^2 + r_t^2) with a series near r_t, so it is
    accurate to rounding (relative error vs mpmath < 5e-14) right up to the edge.

    L(<r) = Int 4 pi r^2 nu dr uses r = r_c sinh(s_t sin phi), s_t = asinh(c): the sinh maps core
    and envelope to comparable ranges and the sin makes the integrand analytic at r_t, so
    Gauss-Legendre in phi converges geometrically. Relative error vs mpmath at n_quad = 32: < 3e-15
    for c from 1.5 to 300, 6e-13 at c = 1e4 (n_quad = 48: < 1e-14 there); n_quad = 24: 2e-11 at
    c = 300.

    Half-light radii: R_e / r_c and r_1/2 / r_c depend on c only; they are found by 60-step
    bisection (below double precision) followed by one Newton step that carries the
    implicit-function gradients (d r_half / d c = -(dL/dc) / (dL/dr)).

    References
    ----------
    King I. 1962, AJ 67, 471.
    """

    r_c: float
    r_t: float
    n_quad: int = static(32)

    @classmethod
    def from_r_half(cls, r_half_2d, concentration, n_quad=32):
        """From the projected half-light radius R_e [kpc] and the concentration c = r_t / r_c."""
        c = jnp.asarray(concentration, dtype=float)
        v = _king_v_half(c)
        r_c = r_half_2d / jnp.sqrt((v - 1.0) * (v + 1.0))
        return cls(r_c=r_c, r_t=c * r_c, n_quad=n_quad)

    def _c(self):
        return jnp.asarray(self.r_t / self.r_c, dtype=float)

    def _inside(self, r):
        """(r < r_t, r clipped inside): the clipped radius keeps unused branches finite."""
        inside = r < self.r_t
        return inside, jnp.where(inside, r, 0.5 * self.r_t)

    def surface_density(self, R):
        c = self._c()
        inside, R_in = self._inside(R)
        x = (R_in / self.r_c) ** 2
        k = 1.0 / (jnp.pi * self.r_c**2 * _king_norm(c))
        # eq. 14; (1 + x)^-1/2 - (1 + c^2)^-1/2 = (c^2 - x) / (v vt (v + vt)), exact near r_t
        v, vt = jnp.sqrt(1.0 + x), jnp.sqrt(1.0 + c**2)
        diff = (self.r_t - R_in) * (self.r_t + R_in) / self.r_c**2 / (v * vt * (v + vt))
        return jnp.where(inside, k * diff**2, 0.0)

    def density(self, r):
        c = self._c()
        inside, r_in = self._inside(r)
        x = (r_in / self.r_c) ** 2
        # 1 - z^2 = (r_t^2 - r^2) / (r_c^2 + r_t^2), free of cancellation near r_t
        w2 = jnp.maximum((self.r_t - r_in) * (self.r_t + r_in) / (self.r_c**2 + self.r_t**2), 0.0)
        z2 = (1.0 + x) / (1.0 + c**2)
        k = 1.0 / (jnp.pi * self.r_c**2 * _king_norm(c))
        # eq. 27 with 1 / ((1 + c^2)^3/2 z^2) = 1 / ((1 + c^2)^1/2 (1 + x))
        nu = k / (jnp.pi * self.r_c * jnp.sqrt(1.0 + c**2) * (1.0 + x)) * _king_g(w2, z2)
        return jnp.where(inside, nu, 0.0)

    def enclosed_2d(self, R):
        c = self._c()
        inside, R_in = self._inside(R)
        x = (R_in / self.r_c) ** 2
        v = jnp.sqrt(1.0 + x)
        a = 1.0 / jnp.sqrt(1.0 + c**2)
        num = jnp.log1p(x) - 4.0 * a * x / (1.0 + v) + a**2 * x  # eq. 18, sqrt(1+x)-1 = x/(1+v)
        return jnp.where(inside, num / _king_norm(c), 1.0)

    def enclosed_3d(self, r):
        c = self._c()
        inside, r_in = self._inside(r)
        u = jnp.arcsinh(r_in / self.r_c) / jnp.arcsinh(c)
        phi_r = jnp.arcsin(jnp.minimum(u, 1.0 - 2.0**-53))  # finite d(arcsin)/du just below r_t
        c_b = jnp.broadcast_to(c, phi_r.shape)
        return jnp.where(inside, _king_l3_phi(phi_r, c_b, self.n_quad), 1.0)

    def r_half_2d(self):
        v = _king_v_half(self._c())
        return self.r_c * jnp.sqrt((v - 1.0) * (v + 1.0))

    def r_half_3d(self):
        c = self._c()
        c0 = jax.lax.stop_gradient(c)
        n = self.n_quad
        phi0 = _bisect(
            lambda p: _king_l3_phi(p, c0, n),
            jnp.zeros_like(c0),
            jnp.full_like(c0, 0.5 * jnp.pi),
            0.5,
            _N_BISECT,
        )
        phi0 = jax.lax.stop_gradient(phi0)
        lum, dlum = _king_l3_phi(phi0, c, n, phi_extra=phi0)
        phi = phi0 - (lum - 0.5) / jax.lax.stop_gradient(dlum)  # implicit-function gradient
        return self.r_c * jnp.sinh(jnp.arcsinh(c) * jnp.sin(phi))

    def r_edge(self):
        return self.r_t


#: name -> class, for satellite files and model specs
LIGHT_PROFILES = {"plummer": Plummer, "exponential": Exponential, "king": King}
