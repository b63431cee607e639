"""Jeans solver against analytic solutions and an independent scipy quadrature.

References used here:
- Plummer self-consistent isotropic model: sigma_los^2(R) = 3 pi G M / (64 sqrt(R^2 + a^2)),
  global <sigma_los^2> = pi G M / (32 a) (Dejonghe 1987, MNRAS 224, 13).
- Isotropic Hernquist sigma_r^2 (Hernquist 1990, ApJ 356, 359, eq. 10).
- Isotropic NFW sigma_r^2 (Lokas & Mamon 2001, MNRAS 321, 155, eq. 14).
- Single-integral kernel form of the projected dispersion (Mamon & Lokas 2005, MNRAS 363, 705,
  appendix), evaluated here by nested scipy quadrature as the independent reference.
- Virial identity: luminosity-weighted global <sigma_los^2> = (G/3) Int 4 pi r nu M dr for any
  beta(r) (e.g. Binney & Tremaine 2008, sec. 4.8.3).
"""

import jax
import jax.numpy as jnp
import mpmath
import numpy as np
import pytest
from scipy import integrate, special

from halo.core.constants import G
from halo.core.pytree import pytree
from halo.physics.anisotropy import BaesVanHese, Constant, OsipkovMerritt
from halo.physics.dark import NFW
from halo.physics.jeans import DEFAULT, FAST, Orders, global_dispersion, sigma_los, sigma_r
from halo.physics.light import Plummer
from halo.physics.mass import MassModel, Stars

from jeans_reference import beta_np, burkert_mass_np, kernel, nfw_mass_np, sigma_los_reference

# the accuracy stated in halo/physics/jeans.py, README.md and DEVELOPERS.md, asserted over the
# anisotropy prior of the shipped specs (beta~ in [-0.95, 0.95], beta from -38 to 0.974)
TOL_DEFAULT = 1e-5
TOL_FAST = 1e-4

# --------------------------------------------------------------------------------------------
# analytic solutions


@pytest.mark.parametrize("orders,tol", [(DEFAULT, 1e-6), (FAST, 3e-5)])
def test_plummer_self_consistent(orders, tol):
    # Dejonghe 1987: sigma_los^2 = 3 pi G M / (64 sqrt(R^2 + a^2))
    a, m = 0.02, 1e5
    light = Plummer(a)
    R = np.geomspace(0.01, 10.0, 50) * a
    s = np.asarray(sigma_los(Stars(light, m), light, Constant(0.0), R, orders))
    ref = np.sqrt(3 * np.pi * G * m / (64 * np.sqrt(R**2 + a**2)))
    err = np.max(np.abs(s / ref - 1))
    print(f"plummer self-consistent max rel err {err:.2e}")
    assert err < tol


def test_plummer_check_values():
    # M = 1e5 Msun, a = 20 pc: sigma_los(0, a, 3a) = 1.779554, 1.496420, 1.000717 km/s, the
    # closed form of Dejonghe 1987 (sigma_los^2 = 3 pi G M / (64 sqrt(R^2 + a^2))) evaluated at
    # these radii [computed from the published formula]; R = 0 is clamped to the grid's inner
    # radius, 10^-3.5 a, which changes the closed form by 5e-8
    light = Plummer(0.02)
    s = sigma_los(Stars(light, 1e5), light, Constant(0.0), jnp.array([0.0, 0.02, 0.06]))
    np.testing.assert_allclose(s, [1.779554, 1.496420, 1.000717], rtol=2e-6)


@pytree
class _HernquistTracer:
    """Hernquist (1990) density as a tracer (normalised), only what sigma_r needs."""

    a: float

    def density(self, r):
        return self.a / (2 * jnp.pi * r * (r + self.a) ** 3)

    def mass(self, r):
        return r**2 / (r + self.a) ** 2

    def r_half_2d(self):
        return self.a

    def r_edge(self):
        return jnp.inf


def test_hernquist_isotropic_sigma_r():
    # Hernquist 1990 (ApJ 356, 359), eq. 10, isotropic, evaluated here with G = M = a = 1:
    # sigma_r^2 = [12 r (r + 1)^3 ln((r + 1) / r) - r / (r + 1) (25 + 52 r + 42 r^2 + 12 r^3)] / 12
    # (0.08709925, 0.10390824, 0.08684411, 0.06178250 at the radii below); our G, so M = 1/G
    h = _HernquistTracer(1.0)

    @pytree
    class Mass:
        def mass(self, r):
            return h.mass(r) / G

    r = np.array([0.1, 0.5, 1.0, 2.0])
    s2 = np.asarray(sigma_r(Mass(), h, Constant(0.0), jnp.asarray(r))) ** 2
    ref = (
        12 * r * (r + 1) ** 3 * np.log((r + 1) / r) - r / (r + 1) * np.polyval([12, 42, 52, 25], r)
    ) / 12
    np.testing.assert_allclose(s2, ref, rtol=1e-6)


def test_nfw_isotropic_sigma_r():
    # Lokas & Mamon 2001 (MNRAS 321, 155), eq. 14 (NFW tracer in its own potential, isotropic),
    # in units of 4 pi G rho_s r_s^2, evaluated here (Li2(-x) = scipy's spence(1 + x)); it gives
    # 0.01534105, 0.05889361, 0.09225691, 0.09343940, 0.08412643, 0.04437937 at the radii below
    halo = NFW(rho_s=1.0, r_s=1.0)

    @pytree
    class Tracer:
        def density(self, r):
            return halo.density(r)

        def r_half_2d(self):
            return 1.0

        def r_edge(self):
            return jnp.inf

    x = jnp.array([0.01, 0.1, 0.5, 1.0, 2.0, 10.0])
    orders = Orders(lo_dex=-4.0, hi_dex=4.0, n_grid=240)
    s2 = np.asarray(sigma_r(halo, Tracer(), Constant(0.0), x, orders)) ** 2 / (4 * np.pi * G)
    x = np.asarray(x)
    lg = np.log1p(x)
    bracket = (
        np.pi**2
        - np.log(x)
        - 1 / x
        - 1 / (1 + x) ** 2
        - 6 / (1 + x)
        + (1 + 1 / x**2 - 4 / x - 2 / (1 + x)) * lg
        + 3 * lg**2
        + 6 * special.spence(1 + x)
    )
    ref = 0.5 * x * (1 + x) ** 2 * bracket
    np.testing.assert_allclose(s2, ref, rtol=1e-5)


# --------------------------------------------------------------------------------------------
# independent reference: Mamon & Lokas (2005) kernel form by nested scipy quadrature


def test_kernel_check_values():
    # the reference's kernel (nested quadrature) against the closed forms of Mamon & Lokas 2005,
    # appendix, evaluated here: constant beta (eq. A16, incomplete beta functions by mpmath),
    # K = u^(2 beta - 1) / 2 [(3/2 - beta) sqrt(pi) Gamma(beta - 1/2) / Gamma(beta)
    #     + beta B(1/u^2; beta + 1/2, 1/2) - B(1/u^2; beta - 1/2, 1/2)]
    # (K(3; 0.25) = 1.1158575401, K(2; -1.3) = 0.5889666616), and Osipkov-Merritt (eq. A18),
    # K = (u_a^2 + 1/2) / (u_a^2 + 1)^(3/2) (u^2 + u_a^2) / u arctan(sqrt((u^2 - 1) / (u_a^2 + 1)))
    #     - sqrt(1 - 1/u^2) / (2 (u_a^2 + 1))   (K(3; u_a = 1) = 1.7214786549)
    def k_const(u, beta):
        def inc(a):
            return mpmath.betainc(a, 0.5, 0, 1 / u**2)

        lead = (1.5 - beta) * mpmath.sqrt(mpmath.pi) * mpmath.gamma(beta - 0.5) / mpmath.gamma(beta)
        return float(0.5 * u ** (2 * beta - 1) * (lead + beta * inc(beta + 0.5) - inc(beta - 0.5)))

    def k_om(u, ua):
        q = ua**2 + 1
        return (ua**2 + 0.5) / q**1.5 * (u**2 + ua**2) / u * np.arctan(
            np.sqrt((u**2 - 1) / q)
        ) - np.sqrt(1 - 1 / u**2) / (2 * q)

    for u, beta in ((3.0, 0.25), (2.0, -1.3), (5.0, 0.7)):
        b, f = beta_np("constant", {"beta": beta})
        assert kernel(u, 1.0, b, f) == pytest.approx(k_const(u, beta), rel=1e-9)
    for u, ua in ((3.0, 1.0), (1.5, 0.3)):
        b, f = beta_np("om", {"r_a": ua})
        assert kernel(u, 1.0, b, f) == pytest.approx(k_om(u, ua), rel=1e-9)
    # beta = 0: K = sqrt(1 - 1/u^2) (Mamon & Lokas 2005)
    b, f = beta_np("constant", {"beta": 0.0})
    assert kernel(2.5, 1.0, b, f) == pytest.approx(np.sqrt(1 - 1 / 2.5**2), rel=1e-10)


ANISOTROPIES = {
    "iso": ("constant", {"beta": 0.0}),
    "radial": ("constant", {"beta": 0.5}),
    "tangential": ("constant", {"beta": -0.8}),
    # beta~ = -0.7 in the symmetrised prior of the fits: f = r^-11 spans ~10^70 on the grid
    "very-tangential": ("constant", {"beta": -5.67}),
    # the edges of the shipped specs' prior, beta~ = -0.95 and 0.95: f = r^-76 and r^1.95
    "prior-tangential-edge": ("constant", {"beta": -38.0}),
    "prior-radial-edge": ("constant", {"beta": 2 * 0.95 / 1.95}),
    "om": ("om", {"r_a": 0.05}),
    "bvh": ("bvh", {"beta_0": -0.2, "beta_inf": 0.6, "r_a": 0.04, "eta": 1.5}),
}


def _anis_jax(kind, p):
    if kind == "constant":
        return Constant(p["beta"])
    if kind == "om":
        return OsipkovMerritt(p["r_a"])
    return BaesVanHese(p["beta_0"], p["beta_inf"], p["r_a"], p["eta"])


HALOS = {
    "nfw": (lambda: NFW(rho_s=3e7, r_s=0.6), lambda: nfw_mass_np(3e7, 0.6)),
    "cored": (None, lambda: burkert_mass_np(2e8, 0.3)),
}

R_E = 0.03  # Plummer projected half-light radius [kpc]
R_TEST = np.array([0.01, 0.1, 1.0, 3.0, 10.0]) * R_E


def _jax_halo(name):
    if name == "nfw":
        return NFW(rho_s=3e7, r_s=0.6)
    from halo.physics.dark import Burkert

    return Burkert(rho_s=2e8, r_s=0.3)


@pytest.mark.parametrize("halo_name", ["nfw", "cored"])
@pytest.mark.parametrize("anis_name", list(ANISOTROPIES))
def test_against_scipy_kernel_reference(halo_name, anis_name):
    kind, p = ANISOTROPIES[anis_name]
    beta, f = beta_np(kind, p)
    mass_np = HALOS[halo_name][1]()
    m_star = 2e4
    ref = np.array([sigma_los_reference(R, mass_np, R_E, beta, f, m_star) for R in R_TEST])
    light = Plummer(R_E)
    model = MassModel((_jax_halo(halo_name), Stars(light, m_star)))
    anis = _anis_jax(kind, p)
    for orders, tol in [(DEFAULT, TOL_DEFAULT), (FAST, TOL_FAST)]:
        s = np.asarray(sigma_los(model, light, anis, R_TEST, orders))
        err = np.max(np.abs(s / ref - 1))
        print(f"{halo_name} {anis_name} {orders is DEFAULT and 'DEFAULT' or 'FAST'} {err:.2e}")
        assert err < tol


# --------------------------------------------------------------------------------------------
# identities, limits, gradients


@pytest.mark.parametrize("anis_name", list(ANISOTROPIES))
def test_virial_identity(anis_name):
    # <sigma_los^2>_global = (G/3) Int 4 pi r nu M dr for any beta(r) (virial theorem)
    kind, p = ANISOTROPIES[anis_name]
    light = Plummer(R_E)
    m_np = nfw_mass_np(3e7, 0.6)
    a = R_E

    def integrand(r):
        nu = 3 / (4 * np.pi * a**3) * (1 + (r / a) ** 2) ** -2.5
        return 4 * np.pi * r * nu * m_np(r)

    ref = G / 3 * integrate.quad(integrand, 0, np.inf, epsabs=0, epsrel=1e-12, limit=300)[0]
    val = float(global_dispersion(NFW(3e7, 0.6), light, _anis_jax(kind, p)))
    assert val == pytest.approx(ref, rel=TOL_DEFAULT)


def test_radial_anisotropy_cored_centre_is_finite():
    # constant beta > 0 with a cored tracer: sigma_los diverges as R -> 0 (An & Evans 2006); the
    # solver clamps R to its inner grid radius and returns a finite value there
    light = Plummer(R_E)
    s = sigma_los(NFW(3e7, 0.6), light, Constant(0.6), jnp.array([0.0, 1e-9, 1e-6, 1e-3]))
    s = np.asarray(s)
    assert np.all(np.isfinite(s))
    r_min = R_E * 10**DEFAULT.lo_dex
    assert s[0] == s[1] == s[2]
    assert s[0] == pytest.approx(float(sigma_los(NFW(3e7, 0.6), light, Constant(0.6), r_min)))
    assert s[0] > s[3]  # still rising inwards, as the divergence says


def test_convergence_with_orders():
    light = Plummer(R_E)
    model = MassModel((NFW(3e7, 0.6), Stars(light, 2e4)))
    anis = OsipkovMerritt(0.05)
    ref = sigma_los(model, light, anis, R_TEST, Orders(n_grid=400, n_panel=6, n_proj=96))
    errs = []
    for n in (32, 64, 128):
        o = Orders(n_grid=n, n_panel=3, n_proj=n // 2, n_proj_panels=2)
        errs.append(float(jnp.max(jnp.abs(sigma_los(model, light, anis, R_TEST, o) / ref - 1))))
    assert errs[0] > errs[1] > errs[2]
    assert errs[2] < 1e-5


PARAMS = ["rho_s", "r_s", "a", "beta", "m_star"]


def _sigma_from(theta, R, orders=FAST):
    rho_s, r_s, a, beta, m_star = theta
    light = Plummer(a)
    model = MassModel((NFW(rho_s, r_s), Stars(light, m_star)))
    return sigma_los(model, light, Constant(beta), R, orders)


def test_gradients_vs_finite_differences():
    theta = jnp.array([3e7, 0.6, R_E, 0.3, 2e4])
    R = jnp.array(0.5 * R_E)
    g = jax.jit(jax.grad(lambda t: _sigma_from(t, R, DEFAULT)))(theta)
    value = jax.jit(lambda t: _sigma_from(t, R, DEFAULT))
    for i, name in enumerate(PARAMS):
        h = 1e-5 * theta[i]
        up = value(theta.at[i].add(h))
        dn = value(theta.at[i].add(-h))
        fd = (up - dn) / (2 * h)
        assert float(g[i]) == pytest.approx(float(fd), rel=1e-5, abs=1e-12), name
    # anisotropy parameters of OM and BvH, and R itself
    light = Plummer(R_E)

    def s_bvh(p):
        return sigma_los(NFW(3e7, 0.6), light, BaesVanHese(p[0], p[1], p[2], p[3]), p[4])

    p = jnp.array([-0.2, 0.6, 0.04, 1.5, 0.02])
    g = jax.jit(jax.grad(s_bvh))(p)
    s_bvh = jax.jit(s_bvh)
    for i in range(5):
        h = 1e-6 * max(abs(float(p[i])), 0.01)
        fd = (s_bvh(p.at[i].add(h)) - s_bvh(p.at[i].add(-h))) / (2 * h)
        assert float(g[i]) == pytest.approx(float(fd), rel=1e-5, abs=1e-10), i


def test_jit_matches_eager_and_vmap():
    theta = jnp.array([3e7, 0.6, R_E, 0.3, 2e4])
    with jax.disable_jit():
        eager = _sigma_from(theta, R_TEST[:2], FAST)
    one = jax.jit(_sigma_from, static_argnums=2)
    jitted = one(theta, R_TEST, FAST)
    np.testing.assert_allclose(eager, jitted[:2], rtol=1e-12)
    # each row of the vmapped batch against its own jitted call (different parameters per row)
    batch = jnp.stack([theta, theta.at[3].set(-0.5), theta.at[0].set(1e8)])
    out = jax.vmap(lambda t: _sigma_from(t, R_TEST))(batch)
    for k in range(batch.shape[0]):
        np.testing.assert_allclose(out[k], one(batch[k], R_TEST, FAST), rtol=1e-12)
    assert np.all(out[2] > out[0])  # denser halo, hotter stars


def test_special_kernels_closed_form_beta_half():
    # beta = 1/2 kernel: K = arccosh u - sqrt(1 - 1/u^2)/2 (Mamon & Lokas 2005, eq. A16 case)
    b, f = beta_np("constant", {"beta": 0.5})
    for u in (1.5, 3.0, 20.0):
        assert kernel(u, 1.0, b, f) == pytest.approx(
            np.arccosh(u) - np.sqrt(1 - 1 / u**2) / 2, rel=1e-9
        )
