"""Closed-form mass estimators, ML dispersion and error propagation.

Reference dispersions come from the anisotropy-free virial identity
<sigma_los^2> = (G / 3L) Int 4 pi r nu(r) M(r) dr (Binney & Tremaine 2008, sec. 4.8.3; Wolf et al.
2010, MNRAS 406, 1220, sec. 2), evaluated with scipy.integrate.quad at epsrel = 1e-12.
"""

import math

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy import integrate, optimize

from halo.core.constants import G
from halo.physics import estimators as est

PC = 1.0e-3  # kpc
A = 0.030  # Plummer scale radius = projected half-light radius R_e [kpc]
R_HALF_3D = A / math.sqrt(2.0 ** (2.0 / 3.0) - 1.0)  # Plummer r_1/2 = 1.30477 R_e [computed]


def plummer_nu(r):
    return 3.0 / (4.0 * math.pi * A**3) * (1.0 + (r / A) ** 2) ** -2.5


def global_sigma2(mass):
    """Luminosity-weighted <sigma_los^2> [km^2/s^2] of a Plummer tracer in potential M(r)."""
    val, err = integrate.quad(
        lambda r: 4.0 * math.pi * r * plummer_nu(r) * mass(r),
        0.0,
        np.inf,
        epsabs=0.0,
        epsrel=1e-12,
        limit=400,
    )
    assert err < 1e-10 * val
    return G / 3.0 * val


def nfw_mass(rho_s, r_s):
    def m(r):
        x = r / r_s
        return 4.0 * math.pi * rho_s * r_s**3 * (math.log1p(x) - x / (1.0 + x))

    return m


def test_coefficients_in_pc_units():
    # Walker et al. 2009, ApJ 704, 1274, eq. 10: mu = 580 Msun pc^-1 km^-2 s^2 [memory]; 5/(2G)
    g_pc = G / PC
    assert est.walker09_mass(1.0, PC) == pytest.approx(2.5 / g_pc, rel=1e-14)
    assert est.walker09_mass(1.0, PC) == pytest.approx(581.0, abs=0.5)  # 581.27
    assert est.walker09_mass(1.0, PC) == pytest.approx(580.0, rel=3e-3)
    # Wolf et al. 2010, MNRAS 406, 1220, eq. 2: M_1/2 ~ 4 <sigma^2> R_e / G ~ 930 sigma^2 R_e
    assert est.wolf10_mass(1.0, PC) == pytest.approx(930.0, rel=1e-4)  # 930.04
    assert est.wolf10_mass(1.0, PC, r_half_3d=2 * PC) == pytest.approx(6.0 / g_pc, rel=1e-14)
    # Errani, Penarrubia & Walker 2018, MNRAS 481, 5073 (abstract): 3.5 x 1.8 R_e <sigma^2> / G
    assert est.errani18_mass(1.0, PC) == pytest.approx(6.3 / g_pc, rel=1e-14)  # 1464.8
    # a typical ultra-faint (sigma = 4 km/s, R_e = 30 pc): M_1/2 ~ 4.5e5 Msun (Wolf 2010 scaling)
    assert est.wolf10_mass(4.0, 30 * PC) == pytest.approx(930.0 * 16 * 30, rel=1e-4)


def test_plummer_global_dispersion():
    # self-consistent isotropic Plummer: <sigma_los^2> = pi G M / (32 a) (Dejonghe 1987, MNRAS 224,
    # 13); checked against the virial identity by quadrature
    m_tot = 1.0e5
    s2 = global_sigma2(lambda r: m_tot * r**3 / (r * r + A * A) ** 1.5)
    assert s2 == pytest.approx(math.pi * G * m_tot / (32.0 * A), rel=1e-11)


def test_self_consistent_plummer():
    # Mass follows light (Plummer 1911; Dejonghe 1987): M(<r) = M r^3 / (r^2 + a^2)^(3/2),
    # <sigma_los^2> = pi G M / (32 a), R_e = a, r_1/2 = 1.30477 a, M(<r_1/2) = M / 2.
    m_tot = 1.0e5
    sigma = math.sqrt(math.pi * G * m_tot / (32.0 * A))

    def m_true(r):
        return m_tot * r**3 / (r * r + A * A) ** 1.5

    assert m_true(R_HALF_3D) == pytest.approx(m_tot / 2.0, rel=1e-13)
    # Wolf 2010 (4/3 R_e): 4 (pi/32) M = (pi/4) M/2: 21.5 per cent low. The estimator assumes a
    # roughly flat sigma_los(R) near R_e (Wolf et al. 2010, sec. 2); the mass-follows-light
    # Plummer's sigma_los falls by 44 per cent between R = 0 and 3a, outside that regime.
    ratio = est.wolf10_mass(sigma, A) / (m_tot / 2.0)
    assert ratio == pytest.approx(math.pi / 4.0, rel=1e-13)
    ratio_exact_r = est.wolf10_mass(sigma, A, r_half_3d=R_HALF_3D) / (m_tot / 2.0)
    assert ratio_exact_r == pytest.approx(3.0 * math.pi / 16.0 * R_HALF_3D / A, rel=1e-13)  # 0.769
    # Walker 2009: (5 pi / 64) M against M(<a) = M / 2^(3/2): 0.694 (30.6 per cent low)
    ratio = est.walker09_mass(sigma, A) / m_true(A)
    assert ratio == pytest.approx(5.0 * math.pi / 64.0 * 2.0**1.5, rel=1e-13)
    # Errani 2018 claims ~10 per cent accuracy: measured -7.4 per cent here
    ratio = est.errani18_mass(sigma, A) / m_true(1.8 * A)
    assert ratio == pytest.approx(0.92592, abs=1e-5)
    assert abs(ratio - 1.0) < 0.10


def test_flat_rotation_curve_is_exact_for_wolf():
    # Any tracer in a potential with constant v_c has <sigma_los^2> = v_c^2 / 3 for any anisotropy
    # (virial identity above), so 3 <sigma_los^2> r_1/2 / G = M(<r_1/2) exactly (Wolf et al. 2010,
    # eq. 2 with the true r_1/2); Walker 2009 then gives (5/6) M(<R_e).
    v_c = 10.0

    def m_sis(r):
        return v_c**2 * r / G

    sigma = math.sqrt(global_sigma2(m_sis))
    assert sigma**2 == pytest.approx(v_c**2 / 3.0, rel=1e-11)
    assert est.wolf10_mass(sigma, A, r_half_3d=R_HALF_3D) == pytest.approx(
        m_sis(R_HALF_3D), rel=1e-11
    )
    # the r_1/2 = 4/3 R_e step: +2.2 per cent for Plummer (Wolf's ~2 per cent statement [memory])
    assert est.wolf10_mass(sigma, A) / m_sis(R_HALF_3D) == pytest.approx(
        4.0 / 3.0 * A / R_HALF_3D, rel=1e-11
    )
    assert est.walker09_mass(sigma, A) / m_sis(A) == pytest.approx(5.0 / 6.0, rel=1e-11)


# R_e / r_s of a massless Plummer tracer (R_e = 30 pc) in an NFW halo; relative errors of
# (Walker, Wolf, Errani), a regression snapshot computed by this project's Jeans solver when the
# test was written (not published values; the papers' own accuracies are cited in the tests):
#   0.1: (+0.237, +0.206, +0.058)   0.3: (+0.008, +0.040, -0.011)   0.5: (-0.088, -0.020, -0.014)
#   1.0: (-0.187, -0.066, +0.023)   2.0: (-0.246, -0.070, +0.104)
NFW_CASES = {
    0.1: (0.237, 0.206, 0.058),
    0.3: (0.008, 0.040, -0.011),
    0.5: (-0.088, -0.020, -0.014),
    1.0: (-0.187, -0.066, 0.023),
    2.0: (-0.246, -0.070, 0.104),
}


@pytest.mark.parametrize("embedding", sorted(NFW_CASES))
def test_plummer_in_nfw_halo(embedding):
    m_dm = nfw_mass(1.0e8, A / embedding)
    sigma = math.sqrt(global_sigma2(m_dm))
    errs = (
        est.walker09_mass(sigma, A) / m_dm(A) - 1.0,
        est.wolf10_mass(sigma, A) / m_dm(R_HALF_3D) - 1.0,
        est.errani18_mass(sigma, A) / m_dm(1.8 * A) - 1.0,
    )
    np.testing.assert_allclose(errs, NFW_CASES[embedding], atol=1e-3)
    if 0.1 <= embedding <= 1.0:
        # Errani et al. 2018: ~10 per cent accuracy for tracers embedded in cusped haloes
        assert abs(errs[2]) < 0.10
    if 0.3 <= embedding <= 2.0:
        # Wolf et al. 2010: accurate when sigma_los(R) is flat near R_e (here within 10 per cent)
        assert abs(errs[1]) < 0.10


def test_estimators_jax():
    s = jnp.array([3.0, 5.0, 8.0])
    r = jnp.array([0.02, 0.1, 0.3])
    for name, func in est.ESTIMATORS.items():
        direct = np.asarray(func(s, r))
        np.testing.assert_allclose(np.asarray(jax.jit(func)(s, r)), direct, rtol=1e-14)
        np.testing.assert_allclose(np.asarray(jax.vmap(func)(s, r)), direct, rtol=1e-14)
        g = jax.grad(lambda x, f=func: f(x, 0.05))(4.0)
        assert float(g) == pytest.approx(2.0 * float(func(4.0, 0.05)) / 4.0, rel=1e-13), name
        assert est.ESTIMATOR_RADIUS[name] > 0


def test_dispersion_ml_no_errors_is_population_std():
    # Gaussian ML with zero errors: mean and ddof = 0 standard deviation (common practice)
    rng = np.random.default_rng(1)
    v = 50.0 + 4.0 * rng.standard_normal(40)
    fit = est.dispersion_ml(v, 0.0, xatol=1e-12)
    assert fit.mean == pytest.approx(v.mean(), rel=1e-12)
    assert fit.sigma == pytest.approx(v.std(), rel=1e-8)
    assert fit.mean_err == pytest.approx(v.std() / math.sqrt(40), rel=1e-8)
    assert fit.sigma_err == pytest.approx(
        v.std() / math.sqrt(80), rel=1e-8
    )  # Fisher sigma/sqrt(2N)
    assert fit.sigma_lo < fit.sigma < fit.sigma_hi
    assert fit.n == 40


def test_dispersion_ml_matches_full_2d_maximisation():
    # the profile-likelihood fit equals a direct 2-D maximisation of the same likelihood (scipy)
    rng = np.random.default_rng(7)
    err = rng.uniform(1.0, 3.0, 60)
    v = 10.0 + rng.normal(0.0, np.hypot(3.0, err))

    def nll(p):
        s = p[1] ** 2 + err**2
        return 0.5 * np.sum((v - p[0]) ** 2 / s + np.log(2 * np.pi * s))

    ref = optimize.minimize(
        nll,
        [v.mean(), v.std()],
        method="Nelder-Mead",
        options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 20000},
    ).x
    fit = est.dispersion_ml(v, err)
    assert fit.mean == pytest.approx(ref[0], abs=1e-6)
    assert fit.sigma == pytest.approx(abs(ref[1]), abs=1e-6)
    # the 68 per cent interval ends sit where the profile log-likelihood drops by 1/2
    for end in (fit.sigma_lo, fit.sigma_hi):
        prof = optimize.minimize_scalar(lambda m, e=end: nll([m, e])).fun
        assert prof - nll([fit.mean, fit.sigma]) == pytest.approx(0.5, abs=1e-6)


def test_dispersion_ml_recovers_truth_with_coverage():
    # seeded Gaussian draws: sigma_true = 3 km/s, errors 1-3 km/s, 100 stars, 300 realisations
    rng = np.random.default_rng(2024)
    sigma_true, n, reps = 3.0, 100, 300
    inside_fisher = inside_profile = 0
    estimates = []
    for _ in range(reps):
        err = rng.uniform(1.0, 3.0, n)
        v = 200.0 + rng.normal(0.0, sigma_true, n) + err * rng.standard_normal(n)
        fit = est.dispersion_ml(v, err)
        estimates.append(fit.sigma)
        inside_fisher += abs(fit.sigma - sigma_true) < fit.sigma_err
        inside_profile += fit.sigma_lo <= sigma_true <= fit.sigma_hi
    # 68.3 per cent nominal coverage; binomial 3-sigma band for 300 trials is +/- 8 per cent
    assert 0.60 < inside_fisher / reps < 0.77
    assert 0.60 < inside_profile / reps < 0.77
    # ML bias is small next to the error (~0.3 km/s here)
    assert abs(np.mean(estimates) - sigma_true) < 0.1
    # a single realisation: within its error of the truth
    err = rng.uniform(1.0, 3.0, 400)
    v = rng.normal(0.0, sigma_true, 400) + err * rng.standard_normal(400)
    fit = est.dispersion_ml(v, err)
    assert abs(fit.sigma - sigma_true) < 2.0 * fit.sigma_err


def test_dispersion_ml_unresolved_and_weights():
    rng = np.random.default_rng(3)
    err = np.full(30, 5.0)
    v = err * rng.standard_normal(30) * 0.5  # scatter well below the errors: unresolved
    fit = est.dispersion_ml(v, err)
    assert fit.sigma == 0.0 and fit.sigma_lo == 0.0 and math.isinf(fit.sigma_err)
    assert fit.sigma_hi > 0.0
    # weight 0 removes a star; weights of 1 change nothing
    v2 = np.append(v, 500.0)
    err2 = np.append(err, 5.0)
    a = est.dispersion_ml(v2, err2, weights=np.append(np.ones(30), 0.0))
    assert a == fit
    with pytest.raises(ValueError):
        est.dispersion_ml([1.0], [1.0])


def test_propagate_linear_and_montecarlo():
    # first-order: dM/M = sqrt((2 d_sigma/sigma)^2 + (dR/R)^2) (M proportional to sigma^2 R_e)
    q = est.propagate("wolf2010", 5.0, 0.1, 0.25, 0.01, method="linear")
    m = est.wolf10_mass(5.0, 0.1)
    assert q["median"] == pytest.approx(m, rel=1e-14)
    assert q["std"] == pytest.approx(m * math.hypot(0.1, 0.1), rel=1e-14)
    assert q["p84"] - q["median"] == pytest.approx(0.99445788 * q["std"], rel=1e-8)
    # Monte Carlo with small errors agrees with the linear result to O(err^2) + sampling noise
    qs = est.propagate("wolf2010", 5.0, 0.1, 0.05, 0.001, method="montecarlo", seed=1)
    ql = est.propagate("wolf2010", 5.0, 0.1, 0.05, 0.001, method="linear")
    assert qs["std"] == pytest.approx(ql["std"], rel=0.01)
    assert qs["median"] == pytest.approx(ql["median"], rel=1e-3)
    # exact Monte Carlo moments for M = k sigma^2 R with independent Gaussians (no truncation at
    # these errors): E[M] = k (s^2 + ds^2) R, var = k^2 [E(s^4) E(R^2) - (E s^2)^2 R^2]
    s, ds, r, dr = 5.0, 1.0, 0.1, 0.02
    k = 3.0 * 4.0 / 3.0 / G
    qs = est.propagate("wolf2010", s, r, ds, dr, method="montecarlo", seed=2, n_samples=400_000)
    es2, es4 = s**2 + ds**2, s**4 + 6 * s**2 * ds**2 + 3 * ds**4
    mean = k * es2 * r
    sd = k * math.sqrt(es4 * (r**2 + dr**2) - es2**2 * r**2)
    assert qs["mean"] == pytest.approx(mean, rel=3e-3)
    assert qs["std"] == pytest.approx(sd, rel=1e-2)
    assert qs["p2.5"] < qs["p16"] < qs["median"] < qs["p84"] < qs["p97.5"]
    # reproducible with the seed, any estimator by name or function
    assert est.propagate(est.errani18_mass, s, r, ds, dr, method="montecarlo", seed=5) == (
        est.propagate("errani2018", s, r, ds, dr, method="montecarlo", seed=5)
    )
    with pytest.raises(ValueError):
        est.propagate("walker2009", 5.0, 0.1, method="bootstrap")
