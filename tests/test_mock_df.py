"""Mock distribution functions against closed forms.

References used here:
- Self-consistent Plummer sphere, isotropic: f(E) = 24 sqrt(2) / (7 pi^3) a^2 / (G^5 M^5) E^(7/2)
  per unit mass (Plummer 1911, MNRAS 71, 460; Dejonghe 1987, MNRAS 224, 13; Binney & Tremaine
  2008, eq. 4.83 divided by M).
- Osipkov-Merritt inversion f(Q) = 1/(sqrt(8) pi^2) d/dQ Int (d rho_Q / d Psi) dPsi / sqrt(Q - Psi),
  rho_Q = (1 + r^2 / r_a^2) rho (Osipkov 1979; Merritt 1985, AJ 90, 1027; Binney & Tremaine 2008,
  eq. 4.67). For the Plummer sphere rho_Q is a sum of powers of Psi, each inverted in closed form
  (Abel integral Int_0^Q Psi^(n-2) (Q - Psi)^(-1/2) dPsi = B(n - 1, 1/2) Q^(n - 3/2)) [computed].
- Isotropic Hernquist f(E) (Hernquist 1990, ApJ 356, 359, eq. 17) [memory; the agreement below to
  1e-4 confirms it].
"""

import math

import jax.numpy as jnp
import numpy as np
import pytest
from mock_setup import M_STARS, A
from scipy import integrate

from halo.core.constants import G
from halo.core.errors import InputError
from halo.core.pytree import pytree
from halo.mock.distribution import distribution_function
from halo.mock.velocities import sample_velocities_df
from halo.physics.anisotropy import Constant, OsipkovMerritt
from halo.physics.dark import NFW
from halo.physics.light import Plummer
from halo.physics.mass import MassModel, Stars


def _plummer_om_df(q, a, m, r_a=math.inf):
    """Closed-form f(Q) of the self-consistent Plummer sphere, per unit mass (see module notes).

    rho_Q = (3 / 4 pi a^3) [(1 - alpha) (Psi/Psi0)^5 + alpha (Psi/Psi0)^3], alpha = a^2 / r_a^2,
    Psi0 = G M / a; Eddington's integral of Psi^n gives Gamma(n + 1) sqrt(pi) / Gamma(n - 1/2)
    Q^(n - 3/2): 128/7 for n = 5 and 8 for n = 3.
    """
    alpha = (a / r_a) ** 2
    psi0 = G * m / a
    c = 3.0 / (4.0 * math.pi * a**3) / (math.sqrt(8.0) * math.pi**2)
    return c * ((1 - alpha) * 128 / 7 * q**3.5 / psi0**5 + alpha * 8 * q**1.5 / psi0**3)


@pytest.fixture(scope="module")
def plummer_df():
    light = Plummer(A)
    return light, Stars(light, M_STARS), distribution_function(Stars(light, M_STARS), light)


# --------------------------------------------------------------------------------------------
# distribution functions against closed forms


def test_plummer_isotropic_df(plummer_df):
    light, mass, df = plummer_df
    r = np.exp(df.ln_r)
    # Binney & Tremaine 2008 eq. 4.83 (per unit mass): 24 sqrt 2 / (7 pi^3) a^2 / (G^5 M^5) E^3.5
    ref = 24 * math.sqrt(2) / (7 * math.pi**3) * A**2 / (G * M_STARS) ** 5 * df.psi**3.5
    np.testing.assert_allclose(ref, _plummer_om_df(df.psi, A, M_STARS), rtol=1e-12)
    sel = (r > 1e-2 * A) & (r < 1e2 * A)
    err = np.max(np.abs(df.f[sel] / ref[sel] - 1))
    print(f"Plummer isotropic f(E) max rel err {err:.1e}")
    assert err < 1e-4
    # potential: Psi = G M / sqrt(r^2 + a^2) (Plummer 1911)
    np.testing.assert_allclose(df.psi, G * M_STARS / np.sqrt(r**2 + A**2), rtol=1e-10)
    assert df.is_physical


def test_df_normalisation(plummer_df):
    # Int 4 pi v^2 f(Psi - v^2/2) dv = nu(r): the DF (interpolated between nodes) reproduces the
    # unit-normalised tracer density (the DF's definition, Binney & Tremaine 2008, sec. 4.3), by
    # scipy quad
    light, _, df = plummer_df
    for r in [0.1 * A, A, 5 * A]:
        psi, depth = df.potential(r)
        val, _ = integrate.quad(
            lambda v, psi=psi, depth=depth: 4 * np.pi * v**2 * df(psi - v**2 / 2, depth + v**2 / 2),
            0.0,
            np.sqrt(2 * psi),
            epsabs=0.0,
            epsrel=1e-7,
            limit=400,
        )
        assert val == pytest.approx(float(light.density(r)), rel=2e-4)


def test_df_grid_convergence():
    # product-integration error falls as n_grid^-2 (second order in the grid step)
    light = Plummer(A)
    mass = Stars(light, M_STARS)
    errs = []
    for n in (500, 1000, 2000):
        df = distribution_function(mass, light, n_grid=n)
        r = np.exp(df.ln_r)
        sel = (r > 1e-2 * A) & (r < 1e2 * A)
        ref = _plummer_om_df(df.psi[sel], A, M_STARS)
        errs.append(np.max(np.abs(df.f[sel] / ref - 1)))
    print("f(E) errors at n_grid 500, 1000, 2000:", errs)
    assert errs[0] / errs[1] > 3.5 and errs[1] / errs[2] > 3.5
    assert errs[2] < 1e-4


@pytest.mark.parametrize("r_a_over_a", [0.8, 1.5, 4.0])
def test_plummer_osipkov_merritt_df(r_a_over_a):
    light = Plummer(A)
    mass = Stars(light, M_STARS)
    df = distribution_function(mass, light, OsipkovMerritt(r_a_over_a * A))
    r = np.exp(df.ln_r)
    sel = (r > 1e-2 * A) & (r < 1e2 * A)
    # closed form from Merritt 1985 / Binney & Tremaine 2008 eq. 4.67 [computed, see module notes]
    ref = _plummer_om_df(df.psi[sel], A, M_STARS, r_a_over_a * A)
    err = np.max(np.abs(df.f[sel] - ref)) / np.max(np.abs(ref))
    print(f"Plummer OM r_a = {r_a_over_a} a: max err / max f {err:.1e}")
    assert err < 1e-4
    assert df.is_physical


def test_osipkov_merritt_positivity_threshold():
    # f(Q) of the OM Plummer sphere is >= 0 everywhere iff r_a >= 3a/4 (Merritt 1985 [memory];
    # follows from the closed form above: 128/7 (1 - alpha) + 8 alpha >= 0 at Q = Psi0, i.e.
    # alpha <= 16/9 [computed])
    light = Plummer(A)
    mass = Stars(light, M_STARS)
    assert not distribution_function(mass, light, OsipkovMerritt(0.7 * A)).is_physical
    assert distribution_function(mass, light, OsipkovMerritt(0.76 * A)).is_physical


@pytree
class _Hernquist:
    """Hernquist (1990) sphere: unit-normalised tracer and (with m) its mass."""

    a: float
    m: float = 1.0

    def density(self, r):
        return self.m * self.a / (2 * jnp.pi * r * (r + self.a) ** 3)

    def enclosed_3d(self, r):
        return r**2 / (r + self.a) ** 2

    def mass(self, r):
        return self.m * self.enclosed_3d(r)

    def r_half_2d(self):
        return 1.8153 * self.a

    def r_edge(self):
        return jnp.inf


def test_hernquist_isotropic_df():
    a, m = 1.0, 1.0 / G  # G M = 1
    df = distribution_function(_Hernquist(a, m), _Hernquist(a))
    # Hernquist 1990 eq. 17 (per unit mass): f = (1 - q^2)^-5/2 [3 asin q + q sqrt(1 - q^2)
    # (1 - 2 q^2)(8 q^4 - 8 q^2 - 3)] / (8 sqrt 2 pi^3 a^3 v_g^3),
    # q^2 = a E / (G M), v_g^2 = G M / a
    q = np.sqrt(df.psi * a / (G * m))
    vg = math.sqrt(G * m / a)
    ref = (
        (1 - q**2) ** -2.5
        * (3 * np.arcsin(q) + q * np.sqrt(1 - q**2) * (1 - 2 * q**2) * (8 * q**4 - 8 * q**2 - 3))
        / (8 * math.sqrt(2) * math.pi**3 * a**3 * vg**3)
    )
    r = np.exp(df.ln_r)
    sel = (r > 1e-3 * a) & (r < 1e3 * a)
    err = np.max(np.abs(df.f[sel] / ref[sel] - 1))
    print(f"Hernquist f(E) max rel err {err:.1e}")
    assert err < 2e-4


def test_cored_tracer_in_cusp_is_not_isotropic():
    # Near the centre of an NFW cusp Psi0 - Psi ~ c r, so a cored tracer has nu ~ nu0 - k (Psi0 -
    # Psi)^2 and f(Psi0) ~ Int g''(y) y^-1/2 dy = (1/2) Int g'(y) y^-3/2 dy < 0 for the Plummer
    # g(y) = (1 + y^2)^-5/2 when a << r_s [computed, local expansion]: no isotropic equilibrium.
    light = Plummer(A)
    mass = MassModel((NFW(3e7, 0.5), Stars(light, M_STARS)))
    df = distribution_function(mass, light)
    assert not df.is_physical
    with pytest.raises(InputError, match="negative"):
        sample_velocities_df(df, np.array([A]), np.random.default_rng(0))
    with pytest.raises(InputError, match="isotropic and Osipkov-Merritt"):
        distribution_function(mass, light, Constant(0.3))
