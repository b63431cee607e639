"""Flattened-tracer mocks (halo.mock.flattened, `halo calibrate --mock-flattening Q`): an oblate
light profile the spherical fit does not assume.

Checks against outside results:
- q = 1, a Plummer tracer in its own potential: sigma^2(r) = G M / (6 sqrt(r^2 + a^2)), isotropic
  (Plummer 1911, MNRAS 71, 460; Dejonghe 1987, MNRAS 224, 13); both sigma_z^2 and <v_phi^2> of
  the axisymmetric equations must equal it.
- The defining z integral and the R derivative against scipy.integrate.quad (adaptive, 1e-12).
- The tensor virial theorem 2 K_jj + W_jj = 0 for a steady system without streaming:
  int nu <v_z^2> dV = int nu z dPhi/dz dV and int nu <v_x^2> dV = int nu x dPhi/dx dV (Binney &
  Tremaine 2008, sect. 4.8.3; section number recalled from memory), evaluated by a deterministic
  quadrature over the spheroid: the second tests the v_phi equation and beta_z.
- The image of a spheroid stratified on similar spheroids is stratified on similar ellipses of
  axis ratio sqrt(cos^2 i + q^2 sin^2 i) (Stark 1977, ApJ 213, 368).
"""

import dataclasses
import math

import jax.numpy as jnp
import numpy as np
import pytest
from scipy import integrate

from halo.batch.sbc import SbcDesign, _one_mock, calibration_satellite, prior_draws
from halo.cli.app import main
from halo.core.constants import G
from halo.core.errors import InputError
from halo.inputs.satellite import read_satellite
from halo.inputs.sky import projected_offsets
from halo.mock.catalogue import make_mock
from halo.mock.flattened import flattening_for, jeans_moments
from halo.physics.dark import DARK_PROFILES
from halo.physics.light import LIGHT_PROFILES
from halo.physics.mass import MassModel, Stars
from halo.pipeline.demo import demo_satellite_path

A = 0.04  # Plummer scale [kpc]
PLUMMER = LIGHT_PROFILES["plummer"].from_r_half(A)
NFW_STARS = MassModel((DARK_PROFILES["nfw"](rho_s=2e7, r_s=0.5, r_t=jnp.inf), Stars(PLUMMER, 1e4)))


def test_a_round_plummer_sphere_has_its_analytic_isotropic_dispersion():
    m = 1e5
    flat = flattening_for(1.0, 0.0)
    R = np.array([1e-3, 0.02, 0.05, 0.2, 0.0])
    z = np.array([0.0, 0.01, 0.03, 0.1, 0.07])
    s_z2, s_R2, vphi2 = jeans_moments(Stars(PLUMMER, m), PLUMMER, flat, R, z)
    exact = G * m / (6.0 * np.sqrt(R**2 + z**2 + A**2))
    np.testing.assert_allclose(s_z2, exact, rtol=1e-8)
    np.testing.assert_allclose(s_R2, exact, rtol=1e-8)
    np.testing.assert_allclose(vphi2, exact, rtol=1e-8)


def test_the_z_integral_and_its_r_derivative_match_adaptive_quadrature():
    flat = flattening_for(0.4, 0.3, beta_z=0.2)
    q, b = flat.q, 1.0 / (1.0 - 0.2)

    def nu(R, z):
        return float(PLUMMER.density(jnp.asarray(math.sqrt(R**2 + (z / q) ** 2))))

    def mass(r):
        return float(NFW_STARS.mass(jnp.asarray(r)))

    def pressure(R, z):
        def f(zp):
            r = math.hypot(R, zp)
            return nu(R, zp) * G * mass(r) * zp / r**3

        return integrate.quad(f, z, np.inf, epsrel=1e-12, limit=500)[0]

    R = np.array([0.002, 0.02, 0.05, 0.2, 0.01])
    z = np.array([0.0, 0.01, 0.03, 0.1, 0.3])
    s_z2, s_R2, vphi2 = jeans_moments(NFW_STARS, PLUMMER, flat, R, z)
    for i, (Ri, zi) in enumerate(zip(R, z, strict=True)):
        ref = pressure(Ri, zi) / nu(Ri, zi)
        h = 1e-4 * Ri  # centred difference: relative error ~h^2, well below the tolerance
        dp = (pressure(Ri + h, zi) - pressure(Ri - h, zi)) / (2 * h)
        r = math.hypot(Ri, zi)
        ref_phi = b * (ref + Ri * dp / nu(Ri, zi)) + G * mass(r) * Ri**2 / r**3
        assert s_z2[i] == pytest.approx(ref, rel=1e-8)
        assert s_R2[i] == pytest.approx(b * ref, rel=1e-8)
        assert vphi2[i] == pytest.approx(ref_phi, rel=1e-6)


def _gauss(a, b, n):
    x, w = np.polynomial.legendre.leggauss(n)
    return 0.5 * (b - a) * (x + 1.0) + a, 0.5 * (b - a) * w


@pytest.mark.parametrize(("q", "beta_z"), [(0.4, 0.0), (0.6, 0.3), (0.7, -0.5)])
def test_the_moments_obey_the_tensor_virial_theorem(q, beta_z):
    flat = flattening_for(q, 0.3, beta_z)
    ln_m, w_m = _gauss(math.log(1e-5), math.log(1e4), 400)  # m / a
    mu, w_mu = _gauss(0.0, 1.0, 48)  # cos(theta) on the spheroid, by symmetry
    m = A * np.exp(ln_m)
    mm, muu = np.meshgrid(m, mu, indexing="ij")
    # nu dV = nu_sph(m) m^2 dm dOmega (the 1/q of nu and the q of dV cancel); dm = m d ln m
    weight = ((np.asarray(PLUMMER.density(jnp.asarray(m))) * m**3 * w_m)[:, None] * w_mu).ravel()
    R, z = (mm * np.sqrt(1.0 - muu**2)).ravel(), (q * mm * muu).ravel()
    s_z2, s_R2, vphi2 = jeans_moments(NFW_STARS, PLUMMER, flat, R, z)
    r = np.hypot(R, z)
    g_over_r3 = G * np.asarray(NFW_STARS.mass(jnp.asarray(r))) / r**3
    # z: <v_z^2> = sigma_z^2; x, averaged over azimuth: <v_x^2> = (sigma_R^2 + <v_phi^2>) / 2
    assert np.sum(weight * s_z2) == pytest.approx(np.sum(weight * g_over_r3 * z**2), rel=1e-7)
    lhs = np.sum(weight * (s_R2 + vphi2) / 2.0)
    assert lhs == pytest.approx(np.sum(weight * g_over_r3 * R**2 / 2.0), rel=1e-7)


def test_the_inclination_gives_the_satellite_s_ellipticity():
    for q, e in [(0.4, 0.3), (0.7, 0.3), (0.2, 0.5), (0.5, 0.0)]:
        flat = flattening_for(q, e)
        i = math.radians(flat.inclination_deg)
        assert math.sqrt(math.cos(i) ** 2 + q**2 * math.sin(i) ** 2) == pytest.approx(1.0 - e)
    assert flattening_for(0.7, 0.3).inclination_deg == pytest.approx(90.0)  # edge-on
    assert flattening_for(0.5, 0.0).inclination_deg == 0.0  # a round image: face-on
    with pytest.raises(InputError, match=r"--mock-flattening.*\(0, 0\.7\]"):
        flattening_for(0.8, 0.3)


def test_a_flattened_mock_has_the_satellite_s_image_and_a_lower_face_on_dispersion():
    sat = read_satellite(demo_satellite_path())  # e = 0.3, PA 65 deg
    mock = make_mock(sat, None, n_stars=6000, seed=5, error_range_kms=(0.0, 0.0), flattening=0.4)
    t = mock.truth["flattening"]
    assert t["intrinsic_axis_ratio"] == 0.4 and t["apparent_ellipticity"] == pytest.approx(0.3)
    assert t["n_negative_vphi2"] == 0 and mock.truth["method_used"] == "gaussian"
    off = projected_offsets(
        np.asarray(mock.table["ra"]), np.asarray(mock.table["dec"]), sat.ra_deg, sat.dec_deg
    )
    pa = math.radians(sat.position_angle_deg)
    x_maj = off.xi_deg * math.sin(pa) + off.eta_deg * math.cos(pa)
    x_min = off.xi_deg * math.cos(pa) - off.eta_deg * math.sin(pa)
    # similar ellipses: |x_min| / q' is distributed as |x_maj|; medians agree to ~2% at 6000 stars
    ratio = np.median(np.abs(x_min)) / np.median(np.abs(x_maj))
    assert ratio == pytest.approx(0.7, rel=0.04)
    # elliptical radii follow the major-axis profile: half the stars inside r_half (Plummer)
    r_ell = np.asarray(mock.stars["R_ell"])
    assert np.median(r_ell) == pytest.approx(sat.r_half_pc * 1e-3, rel=0.04)
    # a round image seen face-on: the line of sight is the short axis, so sigma_los = sigma_z,
    # below the spherical model's sigma of the same image (common practice: flattened systems
    # seen face-on look colder)
    round_sat = dataclasses.replace(sat, ellipticity=0.0)
    kw = {"n_stars": 6000, "seed": 6, "error_range_kms": (0.0, 0.0), "method": "gaussian"}
    face_on = make_mock(round_sat, None, flattening=0.4, **kw)
    sphere = make_mock(round_sat, None, **kw)
    v_face, v_sph = (np.asarray(mk.stars["vlos_true"]) for mk in (face_on, sphere))
    assert face_on.truth["flattening"]["inclination_deg"] == 0.0
    assert np.std(v_face) < 0.9 * np.std(v_sph)
    with pytest.raises(InputError, match="flattened tracer"):
        make_mock(sat, None, n_stars=10, method="df", flattening=0.4)


def test_calibrate_s_flattening_reaches_the_mocks_and_the_record(tmp_path, monkeypatch, capsys):
    design = SbcDesign("nfw", 1, 60, seed=3, foreground_max=0.0, mock_flattening=0.5)
    sat = calibration_satellite(demo_satellite_path(), v_sys_prior=(87.0, 5.0))[0]
    draw = {k: float(v[0]) for k, v in prior_draws(design.spec, sat, 1, 3).items()}
    mock, _, _ = _one_mock(design, sat, draw, np.random.default_rng(1), 0)
    assert mock.truth["flattening"]["intrinsic_axis_ratio"] == 0.5
    assert design.as_dict()["mock_flattening"] == 0.5
    assert any("oblate tracer of intrinsic axis ratio 0.5" in v for v in design.violations())
    base = ["calibrate", "nfw", "--out", str(tmp_path / "o"), "--mocks", "1", "--quiet"]
    for bad, words in [("0", "(0, 1]"), ("0.9", "(0, 0.7]")]:
        code = main([*base, "--mock-flattening", bad])
        err = capsys.readouterr().err.strip()
        assert code == 2 and "--mock-flattening" in err and words in err
        assert len(err.splitlines()) == 1 and "Traceback" not in err
        assert not (tmp_path / "o" / "calibration.json").exists()


HALO = ["--set", "m200=1e9", "--set", "c200=15"]


def test_halo_mock_writes_a_flattened_catalogue_and_refuses_an_impossible_one(tmp_path, capsys):
    import json

    out = tmp_path / "flat.ecsv"
    args = ["mock", "demo", "--out", str(out), "--n-stars", "40", "--seed", "2", *HALO]
    assert main([*args, "--flattening", "0.5"]) == 0
    truth = json.loads((tmp_path / "flat.ecsv.truth.json").read_text())
    assert truth["flattening"]["intrinsic_axis_ratio"] == 0.5
    assert truth["flattening"]["apparent_ellipticity"] == pytest.approx(0.3)
    capsys.readouterr()
    bad = tmp_path / "bad.ecsv"
    code = main(
        ["mock", "demo", "--out", str(bad), "--n-stars", "40", *HALO, "--flattening", "0.9"]
    )
    err = capsys.readouterr().err.strip()
    assert code == 2 and err.count("\n") == 0 and "--flattening" in err and "(0, 0.7]" in err
    assert "--mock-flattening" not in err and not bad.exists()
