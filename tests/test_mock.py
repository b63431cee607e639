"""Mock catalogues: the table contract and its truth, seeds, epochs, the Gaussian method.

The distribution functions are tested in test_mock_df.py, the samples and the sky placement in
test_mock_sampling.py, the written files of ``halo mock`` in test_mock_files.py.

References used here: r_1/2 / R_e = 1 / sqrt(2^(2/3) - 1) for the Plummer sphere (Plummer 1911,
MNRAS 71, 460) [computed].
"""

import math

import numpy as np
import pytest
from astropy.table import Table
from mock_setup import M_STARS, SAT, A, on_grid

from halo.core.errors import InputError
from halo.mock.catalogue import make_mock
from halo.physics.anisotropy import BaesVanHese, Constant, OsipkovMerritt
from halo.physics.dark import NFW, Burkert
from halo.physics.jeans import sigma_r
from halo.physics.light import Plummer
from halo.physics.mass import MassModel, Stars

# --------------------------------------------------------------------------------------------
# catalogue contract, seeds, epochs


def test_seed_reproducibility():
    a = make_mock(SAT, n_stars=300, seed=7)
    b = make_mock(SAT, n_stars=300, seed=7)
    c = make_mock(SAT, n_stars=300, seed=8)
    for col in ("ra", "dec", "vlos", "vlos_err"):
        np.testing.assert_array_equal(a.table[col], b.table[col])
        assert not np.array_equal(a.table[col], c.table[col])
    assert a.truth == b.truth


def test_catalogue_contract_and_truth(tmp_path):
    sat = {**SAT, "ellipticity": 0.2, "position_angle_deg": 100.0}
    dark = Burkert(1e8, 0.3)
    mock = make_mock(
        sat,
        dark,
        anisotropy=OsipkovMerritt(0.05),
        n_stars=400,
        v_sys=62.0,
        error_range_kms=(0.5, 1.5),
        seed=1,
    )
    t = mock.table
    assert t.colnames == ["id", "ra", "dec", "vlos", "vlos_err"]
    assert str(t["ra"].unit) == "deg" and str(t["vlos"].unit) == "km / s"
    assert 0.5 <= t["vlos_err"].min() and t["vlos_err"].max() <= 1.5
    resid = (np.asarray(t["vlos"]) - 62.0 - mock.stars["vlos_true"]) / np.asarray(t["vlos_err"])
    assert abs(np.mean(resid)) < 4 / math.sqrt(400) and abs(np.std(resid) - 1) < 0.15
    truth = mock.truth
    light = Plummer(0.030 * math.sqrt(0.8))
    # r_1/2 / R_e = 1 / sqrt(2^(2/3) - 1) = 1.30477 for Plummer (Plummer 1911 enclosed mass,
    # common practice; the number [computed] from the formula)
    assert truth["r_half_3d_kpc"] == pytest.approx(1.30477 * 0.030 * math.sqrt(0.8), rel=1e-5)
    r3 = truth["r_half_3d_kpc"]
    m_half = float(dark.mass(r3)) + M_STARS * float(light.enclosed_3d(r3))
    assert truth["m_half_msun"] == pytest.approx(m_half, rel=1e-12)
    assert truth["m_half_msun"] - truth["dark_mass_half_msun"] == pytest.approx(
        M_STARS / 2, rel=1e-9
    )
    assert truth["dark_mass_half_msun"] == pytest.approx(float(dark.mass(r3)), rel=1e-12)
    # the earlier name of the same number, kept for one version
    assert truth["m_half_dark_msun"] == truth["dark_mass_half_msun"]
    assert truth["anisotropy"]["r_a"] == 0.05 and truth["dark"]["class"] == "Burkert"
    path = tmp_path / "mock.ecsv"
    t.write(path)
    back = Table.read(path)
    assert back.meta["truth"]["seed"] == 1 and back.meta["truth"]["dark_profile"] == "burkert"
    np.testing.assert_array_equal(back["vlos"], t["vlos"])


def test_epochs_and_offset_hook():
    calls = {}

    def offsets(rng, star, mjd):
        calls["shape"] = (star.shape, mjd.shape)
        return np.where(mjd > 57001.0, 5.0, 0.0)

    mock = make_mock(
        SAT,
        n_stars=200,
        seed=4,
        epochs_mjd=[57000.0, 57001.0, 57002.0],
        error_range_kms=(0.0, 0.0),
        velocity_offsets=offsets,
    )
    t = mock.table
    assert len(t) == 600 and t.colnames[-1] == "mjd" and calls["shape"] == ((600,), (600,))
    first = t[t["mjd"] == 57000.0]
    second = t[t["mjd"] == 57001.0]
    third = t[t["mjd"] == 57002.0]
    np.testing.assert_array_equal(first["id"], second["id"])
    np.testing.assert_array_equal(first["ra"], third["ra"])
    # zero errors: the same true velocity at every epoch, plus the hook's offsets
    np.testing.assert_allclose(second["vlos"], first["vlos"], rtol=0, atol=1e-12)
    np.testing.assert_allclose(third["vlos"] - first["vlos"], 5.0, rtol=0, atol=1e-12)


def test_gaussian_method_any_anisotropy_and_errors():
    anis = BaesVanHese(beta_0=-0.2, beta_inf=0.6, r_a=0.04, eta=2.0)
    mock = make_mock(SAT, NFW(3e7, 0.5), anisotropy=anis, n_stars=3000, seed=9, method="gaussian")
    st = mock.stars
    # v_r ~ N(0, sigma_r) from the Jeans solver: standardised values have unit variance
    light = Plummer(A)
    mass = MassModel((NFW(3e7, 0.5), Stars(light, M_STARS)))
    s_r = on_grid(lambda x: sigma_r(mass, light, anis, x), np.asarray(st["r"]))
    z = np.asarray(st["v_r"]) / s_r
    assert abs(np.var(z) - 1) < 4 * math.sqrt(2 / z.size)
    assert mock.truth["df_physical"] is None
    with pytest.raises(InputError, match="isotropic and Osipkov-Merritt"):
        make_mock(SAT, anisotropy=Constant(0.3), n_stars=10, method="df")
    with pytest.raises(InputError, match="method"):
        make_mock(SAT, n_stars=10, method="jeans")
    with pytest.raises(InputError, match="error range"):
        make_mock(SAT, n_stars=10, error_range_kms=(2.0, 1.0))
