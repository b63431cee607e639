"""Mock samples against the light profile and the (independent) Jeans solver; sky placement.

References used here:
- Plummer sphere: enclosed light fractions (Plummer 1911, MNRAS 71, 460); sigma_los^2(R) =
  3 pi G M / (64 sqrt(R^2 + a^2)) and global <sigma_los^2> = pi G M / (32 a) (Dejonghe 1987,
  MNRAS 224, 13).
- Kolmogorov-Smirnov test of the sampled radii (scipy.stats.kstest).
- Gnomonic (TAN) projection (Calabretta & Greisen 2002, A&A 395, 1077, sec. 5.1.3).
"""

import math

import jax.numpy as jnp
import numpy as np
import pytest
from astropy.coordinates import SkyCoord
from mock_setup import M_STARS, SAT, A, on_grid
from scipy import stats

from halo.core.constants import G
from halo.mock.catalogue import make_mock
from halo.mock.distribution import distribution_function
from halo.mock.positions import sample_positions
from halo.mock.velocities import line_of_sight_velocity, sample_velocities_df
from halo.physics.anisotropy import Constant, OsipkovMerritt
from halo.physics.dark import Burkert
from halo.physics.jeans import sigma_los, sigma_r
from halo.physics.light import Plummer
from halo.physics.mass import MassModel, Stars


def test_positions_follow_light():
    light = Plummer(A)
    pos = sample_positions(light, 4000, np.random.default_rng(11))
    # Kolmogorov-Smirnov against the closed-form enclosed fractions (Plummer 1911)
    p2 = stats.kstest(pos.R, lambda R: np.asarray(light.enclosed_2d(jnp.asarray(R)))).pvalue
    p3 = stats.kstest(pos.r, lambda r: np.asarray(light.enclosed_3d(jnp.asarray(r)))).pvalue
    print(f"KS p-values: projected {p2:.3f}, 3D {p3:.3f}")
    assert p2 > 0.01 and p3 > 0.01
    # isotropic directions: the mean of z / r is 0 and its variance 1/3 (uniform cos theta)
    mu = pos.z / pos.r
    assert abs(mu.mean()) < 4 * math.sqrt(1 / 3 / mu.size)
    assert abs(np.mean(mu**2) - 1 / 3) < 4 * math.sqrt(4 / 45 / mu.size)


def _bin_pulls(x, v2, model2, n_bins=8):
    """Per-bin (observed - model) / standard error of the mean of v^2, bins of equal counts."""
    edges = np.quantile(x, np.linspace(0, 1, n_bins + 1))
    idx = np.clip(np.digitize(x, edges[1:-1]), 0, n_bins - 1)
    pulls = []
    for b in range(n_bins):
        s = idx == b
        se = np.std(v2[s]) / math.sqrt(s.sum())
        pulls.append((v2[s].mean() - model2[s].mean()) / se)
    return np.array(pulls)


@pytest.mark.parametrize("anis", [Constant(0.0), OsipkovMerritt(1.5 * A)], ids=["iso", "om"])
def test_df_mock_matches_jeans(anis):
    # DF sampling and the Jeans solver are independent methods: the mock's mean v_los^2 in radial
    # bins must equal the Jeans sigma_los^2 averaged over the same stars, within sampling error
    # (standard error of the mean of v^2 per bin). A cored halo keeps the DF positive.
    light = Plummer(A)
    mass = MassModel((Burkert(1e8, 0.3), Stars(light, 3e3)))
    df = distribution_function(mass, light, anis)
    rng = np.random.default_rng(2024)
    pos = sample_positions(light, 20000, rng)
    vel = sample_velocities_df(df, pos.r, rng)
    v = line_of_sight_velocity(pos, vel)
    model = on_grid(lambda x: sigma_los(mass, light, anis, x), pos.R) ** 2
    pulls = _bin_pulls(pos.R, v**2, model)
    print("sigma_los^2 pulls:", np.round(pulls, 2))
    assert np.all(np.abs(pulls) < 4) and np.sum(pulls**2) < 26.1  # chi^2_8, p = 0.001
    # 3D moments: <v_r^2> = sigma_r^2 and <v_t^2> / 2 = (1 - beta) sigma_r^2 (Jeans solver)
    s_r2 = on_grid(lambda x: sigma_r(mass, light, anis, x), pos.r) ** 2
    beta = np.asarray(anis.beta(jnp.asarray(pos.r)))
    pulls_r = _bin_pulls(pos.r, vel.v_r**2, s_r2)
    pulls_t = _bin_pulls(pos.r, 0.5 * (vel.v_theta**2 + vel.v_phi**2), (1 - beta) * s_r2)
    print("sigma_r^2 pulls:", np.round(pulls_r, 2), "sigma_t^2 pulls:", np.round(pulls_t, 2))
    assert np.all(np.abs(pulls_r) < 4) and np.all(np.abs(pulls_t) < 4)


def test_stars_only_plummer_dispersion():
    # stars-only Plummer, M = 2e3 Msun (L = 1e3 Lsun, M/L = 2), R_e = 30 pc: central
    # sigma_los = 0.205 km/s from the closed form of Dejonghe 1987 (MNRAS 224, 13) [computed]
    s0 = math.sqrt(3 * math.pi * G * M_STARS / (64 * A))
    assert s0 == pytest.approx(0.205, abs=5e-4)
    mock = make_mock(SAT, n_stars=20000, seed=5)
    st = mock.stars
    v = np.asarray(st["vlos_true"])
    glob2 = math.pi * G * M_STARS / (32 * A)
    se = np.std(v**2) / math.sqrt(v.size)
    print(f"global sigma_los {math.sqrt(np.mean(v**2)):.4f} vs {math.sqrt(glob2):.4f} km/s")
    assert abs(np.mean(v**2) - glob2) < 4 * se
    central = np.asarray(st["R"]) < 0.25 * A
    R_c = np.asarray(st["R"])[central]
    model = np.mean(3 * math.pi * G * M_STARS / (64 * np.sqrt(R_c**2 + A**2)))
    se = np.std(v[central] ** 2) / math.sqrt(central.sum())
    print(f"central sigma_los {math.sqrt(np.mean(v[central] ** 2)):.4f} (model {model**0.5:.4f})")
    assert abs(np.mean(v[central] ** 2) - model) < 4 * se
    assert mock.truth["df_physical"] is True


# --------------------------------------------------------------------------------------------
# sky placement


def _gnomonic(ra, dec, ra0, dec0):
    """Standard coordinates (xi, eta) [rad] of the TAN projection about (ra0, dec0) [deg]
    (Calabretta & Greisen 2002, A&A 395, 1077, sec. 5.1.3)."""
    a, d, a0, d0 = (np.radians(x) for x in (ra, dec, ra0, dec0))
    cos_c = np.sin(d0) * np.sin(d) + np.cos(d0) * np.cos(d) * np.cos(a - a0)
    xi = np.cos(d) * np.sin(a - a0) / cos_c
    eta = (np.cos(d0) * np.sin(d) - np.sin(d0) * np.cos(d) * np.cos(a - a0)) / cos_c
    return xi, eta


def test_sky_shape_and_half_light_radius():
    e, pa, n = 0.4, 30.0, 6000
    sat = {**SAT, "ellipticity": e, "position_angle_deg": pa, "dec_deg": 60.0}
    mock = make_mock(sat, n_stars=n, seed=3, method="gaussian")
    t = mock.table
    xi, eta = _gnomonic(np.asarray(t["ra"]), np.asarray(t["dec"]), sat["ra_deg"], sat["dec_deg"])
    d = sat["distance_kpc"]
    # the inverse gnomonic projection is exact: forward projection returns the offsets
    np.testing.assert_allclose(xi * d, mock.stars["xi"], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(eta * d, mock.stars["eta"], rtol=1e-9, atol=1e-12)
    centre = SkyCoord(sat["ra_deg"], sat["dec_deg"], unit="deg")
    sep = centre.separation(SkyCoord(t["ra"], t["dec"])).rad
    np.testing.assert_allclose(np.tan(sep), np.hypot(xi, eta), rtol=1e-9)
    # shape from the moments of the unit offset vectors: for elliptical isophotes of axis ratio q
    # their eigenvalues are 1/(1 + q) and q/(1 + q) [computed: <cos^2> over the ellipse angle
    # Int cos^2 t / (cos^2 t + q^2 sin^2 t) dt / 2 pi = 1/(1 + q)]
    u = np.stack([xi, eta]) / np.hypot(xi, eta)
    w, vec = np.linalg.eigh(u @ u.T / n)
    e_hat = 1 - w[0] / w[1]
    pa_hat = math.degrees(math.atan2(vec[0, 1], vec[1, 1])) % 180.0
    print(f"ellipticity {e_hat:.3f} (in {e}), PA {pa_hat:.1f} deg (in {pa})")
    # 4 x the scatter over 40 seeds at n = 6000 (0.011 in e, 1.1 deg in PA)
    assert abs(e_hat - e) < 0.045
    assert abs(pa_hat - pa) < 4.5
    # circularised half-light radius: median of the circularised radii = r_half sqrt(1 - e);
    # the Plummer median's standard error is R_e / sqrt(n) (1 / (2 sqrt(n) p(R_e)), p = 1/(2 R_e))
    c, s = math.cos(math.radians(pa)), math.sin(math.radians(pa))
    x_maj, y_min = (xi * s + eta * c) * d, (xi * c - eta * s) * d
    q = 1 - e
    r_ell = np.hypot(x_maj, y_min / q)
    r_circ = math.sqrt(q) * r_ell
    target = 0.030 * math.sqrt(q)
    print(f"median circularised radius {np.median(r_circ) * 1e3:.2f} pc vs {target * 1e3:.2f} pc")
    assert abs(np.median(r_circ) - target) < 4 * target / math.sqrt(n)
    assert abs(np.median(r_ell) - 0.030) < 4 * 0.030 / math.sqrt(n)
    np.testing.assert_allclose(r_circ, mock.stars["R"], rtol=1e-6)
