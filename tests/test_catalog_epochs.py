"""Velocity catalogues: epochs merged into stars, warnings, the per-star table.

References used here: inverse-variance weighted mean and its chi2 (common practice); chi2
survival function from scipy.stats.
"""

import math

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import SkyCoord
from astropy.table import Table
from catalog_setup import SAT, base_table
from scipy import stats

from halo.inputs.catalogue import stars_from_table


# ----------------------------------------------------------------------------- epochs
def test_epoch_merging_against_hand_computation():
    t = base_table()
    s = stars_from_table(t, SAT)
    rows = np.flatnonzero(t["id"] == "S00")  # rows 0, 2, 7
    v, e, mjd = (np.asarray(t[c][rows], dtype=float) for c in ("vlos", "vlos_err", "mjd"))
    w = 1.0 / e**2
    mean = np.average(v, weights=w)  # inverse-variance weighted mean (common practice)
    chi2 = np.sum((v - mean) ** 2 / e**2)
    i = list(s.id).index("S00")
    assert s.v[i] == pytest.approx(mean, rel=1e-14)
    assert s.v_err[i] == pytest.approx(1.0 / math.sqrt(w.sum()), rel=1e-14)
    assert s.chi2[i] == pytest.approx(chi2, rel=1e-12) and s.chi2_dof[i] == 2
    assert s.p_var[i] == pytest.approx(stats.chi2.sf(chi2, 2), rel=1e-12)
    assert s.n_epochs[i] == 3 and s.baseline_days[i] == pytest.approx(mjd.max() - mjd.min())
    # epoch arrays: the star's block, sorted by mjd, pointing back at its file rows
    block = s.epoch_star == i
    order = np.argsort(mjd)
    np.testing.assert_array_equal(s.epoch_v[block], v[order])
    np.testing.assert_array_equal(s.epoch_err[block], e[order])
    np.testing.assert_array_equal(s.epoch_row[block], rows[order] + 1)
    assert np.all(np.diff(s.epoch_star) >= 0) and len(s.epoch_v) == s.n_rows
    assert np.isclose(s.member_prob[i], np.mean(t["member_prob"][rows]))
    # two epochs: chi2 = (v1 - v2)^2 / (e1^2 + e2^2) (algebra of the weighted mean)
    j = list(s.id).index("S01")
    r2 = np.flatnonzero(t["id"] == "S01")
    dv, ee = np.diff(t["vlos"][r2])[0], np.sum(np.asarray(t["vlos_err"][r2]) ** 2)
    assert s.chi2[j] == pytest.approx(dv**2 / ee, rel=1e-12) and s.chi2_dof[j] == 1
    # single-epoch stars
    single = s.n_epochs == 1
    assert single.sum() == 10 and (s.chi2[single] == 0).all() and np.isnan(s.p_var[single]).all()
    np.testing.assert_array_equal(s.id, [f"S{k:02d}" for k in range(12)])
    assert "15 rows merged into 12 stars (2 with several epochs)" in s.notes
    with pytest.raises(ValueError):  # read-only arrays
        s.v[0] = 1.0


def test_epochs_far_apart_on_the_sky_warn():
    t = base_table()
    t["dec"][7] += 5.0 / 3600  # third epoch of S00 moved by 5 arcsec
    s = stars_from_table(t, SAT)
    assert any("1 star(s) have epochs more than 1 arcsec apart" in w for w in s.warnings)
    assert any("'S00'" in w for w in s.warnings)


# ----------------------------------------------------------------------------- warnings
def test_warnings_few_far_and_fast_stars():
    s = stars_from_table(base_table(n_stars=5), SAT)
    assert s.warnings == ("only 5 stars: velocity dispersion likely unresolved",)
    t = base_table()
    far = SkyCoord(150.0 * u.deg, 20.0 * u.deg).directional_offset_by(30 * u.deg, 1.3 * u.deg)
    i = list(t["id"]).index("S07")
    t["ra"][i], t["dec"][i] = far.ra.deg, far.dec.deg  # 11.3 r_half along the major axis
    s = stars_from_table(t, SAT)
    assert len(s.warnings) == 1 and "1 star(s) beyond 10 half-light radii" in s.warnings[0]
    assert "'S07'" in s.warnings[0]
    t = base_table(units=False)
    t["vlos"] *= 1e3  # m/s without a unit
    s = stars_from_table(t, SAT)
    assert any("check the unit of 'vlos'" in w for w in s.warnings)


def test_to_table_round_trips_through_ecsv(tmp_path):
    s = stars_from_table(base_table(), SAT)
    tab = s.to_table()
    tab.write(tmp_path / "m.ecsv")
    back = Table.read(tmp_path / "m.ecsv")
    np.testing.assert_array_equal(back["v"], s.v)
    assert back["radius_deg"].unit == u.deg and list(back["id"]) == list(s.id)
