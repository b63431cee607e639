"""Velocity catalogues: formats, units, one-line rejections, epoch merging, projected radii."""

import hashlib
import math
import re

import astropy.units as u
import jax
import jax.numpy as jnp
import numpy as np
import pytest
from astropy.coordinates import SkyCoord
from astropy.table import MaskedColumn, Table
from astropy.time import Time
from scipy import stats

from halo.core.errors import InputError
from halo.inputs.catalogue import (
    angle_to_kpc,
    parse_column_overrides,
    projected_offsets,
    read_catalogue,
    stars_from_table,
)
from halo.inputs.satellite import parse_satellite

SAT = parse_satellite(
    {
        "name": "Test",
        "ra_deg": 150.0,
        "dec_deg": 20.0,
        "distance_kpc": 50.0,
        "r_half_pc": 100.0,  # 0.1146 deg at 50 kpc
        "ellipticity": 0.3,
        "position_angle_deg": 30.0,
        "stellar_mass_msun": 1e4,
    }
)

FORMATS = {
    ".ecsv": "ascii.ecsv",
    ".fits": "fits",
    ".FITS": "fits",
    ".fits.gz": "fits",
    ".vot": "votable",
    ".xml": "votable",
    ".csv": "ascii.csv",
    ".txt": "ascii.csv",
}


def base_table(n_stars=12, units=True):
    """n_stars stars within ~0.05 deg of the centre; S00 has 3 epochs and S01 2, interleaved."""
    rng = np.random.default_rng(1)
    ids = [f"S{i:02d}" for i in range(n_stars)]
    ids = ids[:2] + ["S00"] + ids[2:5] + ["S01", "S00"] + ids[5:]
    n = len(ids)
    pos = {s: (150.0 + rng.uniform(-0.05, 0.05), 20.0 + rng.uniform(-0.05, 0.05)) for s in ids}
    t = Table()
    t["id"] = ids
    t["ra"] = [pos[s][0] for s in ids]
    t["dec"] = [pos[s][1] for s in ids]
    t["vlos"] = np.round(rng.normal(60.0, 5.0, n), 3)
    t["vlos_err"] = np.round(rng.uniform(0.5, 3.0, n), 3)
    t["mjd"] = 57000.0 + np.round(rng.uniform(0, 900, n), 4)
    t["member_prob"] = np.round(rng.uniform(0.5, 1.0, n), 3)
    if units:
        for c, unit in [("ra", "deg"), ("dec", "deg"), ("vlos", "km/s"), ("vlos_err", "km/s")]:
            t[c].unit = unit
        t["mjd"].unit = "d"
    return t


def write(table, path):
    fmt = next(f for ext, f in FORMATS.items() if str(path).endswith(ext))
    table.write(path, format=fmt, overwrite=True)
    return path


STAR_FIELDS = [
    "ra", "dec", "v", "v_err", "baseline_days", "chi2", "p_var", "member_prob", "xi_deg",
    "eta_deg", "radius_ell_deg", "radius_deg", "epoch_v", "epoch_err", "epoch_mjd",
]  # fmt: skip
INT_FIELDS = ["id", "n_epochs", "chi2_dof", "epoch_star", "epoch_row"]


# ----------------------------------------------------------------------------- formats
@pytest.mark.parametrize("ext", list(FORMATS))
def test_formats_read_back_identically(tmp_path, ext):
    t = base_table()
    ref = stars_from_table(t, SAT)
    path = write(t, tmp_path / f"cat{ext}")
    s = read_catalogue(path, SAT)
    for f in INT_FIELDS:
        np.testing.assert_array_equal(getattr(s, f), getattr(ref, f), err_msg=f)
    for f in STAR_FIELDS:
        np.testing.assert_allclose(getattr(s, f), getattr(ref, f), rtol=1e-14, err_msg=f)
    assert s.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert s.source == str(path) and s.n_rows == len(t) == 15 and s.n_stars == 12
    assert s.warnings == ()
    unit_notes = [n for n in s.notes if "no unit" in n]
    if FORMATS[ext] == "ascii.csv":  # CSV carries no units
        assert unit_notes == [
            "columns ra, dec carry no unit: taken as deg",
            "columns vlos, vlos_err carry no unit: taken as km/s",
        ]
    else:
        assert unit_notes == []


def test_unknown_extension_and_missing_file(tmp_path):
    p = tmp_path / "cat.dat"
    p.write_text("id,ra\n")
    with pytest.raises(InputError, match="cat.dat: unknown catalogue format"):
        read_catalogue(p, SAT)
    with pytest.raises(InputError, match="nope.csv: no such file"):
        read_catalogue(tmp_path / "nope.csv", SAT)
    bad = tmp_path / "broken.fits"
    bad.write_text("not a fits file")
    with pytest.raises(InputError, match="broken.fits: cannot read as fits"):
        read_catalogue(bad, SAT)


def test_no_id_column_each_row_a_star(tmp_path):
    t = base_table()
    t.remove_columns(["id", "mjd", "member_prob"])
    s = read_catalogue(write(t, tmp_path / "c.ecsv"), SAT)
    assert s.n_stars == s.n_rows == 15 and list(s.id[:3]) == ["1", "2", "3"]
    np.testing.assert_array_equal(s.v, t["vlos"])
    assert np.isnan(s.epoch_mjd).all() and (s.baseline_days == 0).all()
    assert s.member_prob is None and np.isnan(s.p_var).all()


# ----------------------------------------------------------------------------- columns
def test_parse_column_overrides():
    got = parse_column_overrides(["vlos=VHEL", " VLOS_ERR = e_VHEL ", "ra=RA=J2000"])
    assert got == {"vlos": "VHEL", "vlos_err": "e_VHEL", "ra": "RA=J2000"}
    assert parse_column_overrides([]) == {} and parse_column_overrides(None) == {}
    for bad, needle in [
        (["vlos"], "expected ROLE=NAME"),
        (["vlos="], "expected ROLE=NAME"),
        (["=VHEL"], "expected ROLE=NAME"),
        (["speed=VHEL"], "unknown column role 'speed'"),
        (["vlos=A", "VLOS=B"], "given twice"),
    ]:
        with pytest.raises(InputError, match=needle) as e:
            parse_column_overrides(bad)
        assert "\n" not in str(e.value)


def test_case_insensitive_columns_and_overrides(tmp_path):
    t = base_table()
    ref = stars_from_table(t, SAT)
    t.rename_columns(["id", "ra", "dec", "vlos", "vlos_err"], ["ID", "RA", "Dec", "VHEL", "EV"])
    path = write(t, tmp_path / "c.fits")
    s = read_catalogue(path, SAT, parse_column_overrides(["vlos=vhel", "vlos_err=EV"]))
    np.testing.assert_array_equal(s.v, ref.v)
    assert s.columns["vlos"] == "VHEL" and s.columns["dec"] == "Dec"
    with pytest.raises(InputError, match=r"c.fits: missing required column 'vlos'.*--column"):
        read_catalogue(path, SAT)
    with pytest.raises(InputError, match=r"column 'V' \(given for vlos\) not found"):
        read_catalogue(path, SAT, {"vlos": "V", "vlos_err": "EV"})
    with pytest.raises(InputError, match="unknown column role 'speed'"):
        read_catalogue(path, SAT, {"speed": "VHEL"})
    with pytest.raises(InputError, match="'RA' is used for both ra and dec"):
        read_catalogue(path, SAT, {"vlos": "VHEL", "vlos_err": "EV", "dec": "RA"})
    t["ra"] = t["RA"]
    with pytest.raises(InputError, match="ambiguous: RA, ra"):
        read_catalogue(write(t, tmp_path / "d.ecsv"), SAT, {"vlos": "VHEL", "vlos_err": "EV"})


# ----------------------------------------------------------------------------- units
def test_units_convert(tmp_path):
    t = base_table()
    ref = stars_from_table(t, SAT)
    t["vlos"] = (t["vlos"] * 1e3).astype(float)
    t["vlos"].unit = "m/s"
    t["vlos_err"] = t["vlos_err"] * 1e5
    t["vlos_err"].unit = "cm/s"
    t["ra"] = t["ra"] / 15.0
    t["ra"].unit = "hourangle"
    t["dec"] = np.deg2rad(t["dec"])
    t["dec"].unit = "rad"
    t["member_prob"] = t["member_prob"] * 100.0
    t["member_prob"].unit = "%"
    t["mjd"] = Time(t["mjd"], format="mjd")  # an astropy Time column: its MJD is used
    s = read_catalogue(write(t, tmp_path / "c.ecsv"), SAT)
    for f in STAR_FIELDS:
        # hourangle -> deg rounding: ~1e-14 deg absolute on the offsets
        np.testing.assert_allclose(getattr(s, f), getattr(ref, f), rtol=1e-12, atol=1e-12)
    assert not [n for n in s.notes if "no unit" in n]


@pytest.mark.parametrize(
    "col,unit", [("vlos", "deg"), ("vlos_err", "kpc"), ("ra", "km/s"), ("member_prob", "m")]
)
def test_unit_that_does_not_convert(tmp_path, col, unit):
    t = base_table()
    t[col].unit = unit
    with pytest.raises(InputError) as e:
        read_catalogue(write(t, tmp_path / "c.ecsv"), SAT)
    msg = str(e.value)
    assert "c.ecsv" in msg and f"'{col}'" in msg and "does not convert" in msg and "\n" not in msg


def test_unrecognised_unit_in_fits_is_rejected_and_reported(tmp_path):
    t = base_table()
    t["vlos"].unit = u.Unit("kms_please", parse_strict="silent")
    with pytest.warns(u.UnitsWarning):  # astropy complains while writing the bad unit
        path = write(t, tmp_path / "c.fits")
    with pytest.raises(InputError, match=r"c.fits: column 'vlos' \(vlos\) has unit 'kms_please'"):
        read_catalogue(path, SAT)


# ----------------------------------------------------------------------------- rejections
def _set(col, value, row=4):
    def change(t):
        t[col][row] = value

    return change


def _mask(col, row=4):
    def change(t):
        t[col] = MaskedColumn(t[col], mask=np.arange(len(t)) == row)

    return change


def _dup(t):  # row 7 repeats the id and mjd of row 2 (both S01)
    t["mjd"][6] = t["mjd"][1]


def _dup_no_mjd(t):
    t.remove_column("mjd")


REJECTIONS = [
    (_set("vlos", np.nan), 5, "vlos", "not finite"),
    (_set("ra", np.inf), 5, "ra", "not finite"),
    (_mask("dec"), 5, "dec", "missing value"),
    (_mask("id", row=2), 3, "id", "missing id"),
    (_set("vlos_err", 0.0), 5, "vlos_err", "must be positive"),
    (_set("vlos_err", -1.0, row=0), 1, "vlos_err", "must be positive"),
    (_set("ra", 360.0), 5, "ra", "[0, 360)"),
    (_set("ra", -0.5), 5, "ra", "[0, 360)"),
    (_set("dec", 90.5), 5, "dec", "[-90, 90]"),
    (_set("member_prob", 1.2), 5, "member_prob", "[0, 1]"),
    (_set("member_prob", -0.1), 5, "member_prob", "[0, 1]"),
    (_mask("member_prob", row=9), 10, "member_prob", "missing value"),
    (_dup, 7, "mjd", "as row 2"),
    (_dup_no_mjd, 3, "id", "repeats row 1"),
]


@pytest.mark.parametrize("change,row,col,needle", REJECTIONS)
def test_rejections_name_file_row_and_column(tmp_path, change, row, col, needle):
    t = base_table()
    change(t)
    with pytest.raises(InputError) as e:
        read_catalogue(write(t, tmp_path / "bad.ecsv"), SAT)
    msg = str(e.value)
    assert "\n" not in msg
    assert msg.startswith(f"{tmp_path / 'bad.ecsv'}:")
    assert re.search(rf"\brow {row}\b", msg), msg
    assert f"'{col}'" in msg and needle in msg, msg


def test_non_numeric_text_in_csv(tmp_path):
    p = tmp_path / "bad.csv"
    lines = ["id,ra,dec,vlos,vlos_err"] + [f"s{i},150.0{i},20,{50 + i},1" for i in range(5)]
    lines[4] = "s3,150.03,20,fast,1"  # data row 4
    p.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError) as e:
        read_catalogue(p, SAT)
    msg = str(e.value)
    assert "bad.csv" in msg and "row 4," in msg and "'vlos'" in msg and "'fast'" in msg
    assert "\n" not in msg
    lines[4] = "s3,150.03,20,53,"  # an empty field is a missing value
    p.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match=r"bad.csv: row 4, column 'vlos_err': missing value"):
        read_catalogue(p, SAT)


def test_missing_column_and_too_few_stars(tmp_path):
    t = base_table()
    t.remove_column("vlos_err")
    with pytest.raises(InputError, match="bad.vot: missing required column 'vlos_err'"):
        read_catalogue(write(t, tmp_path / "bad.vot"), SAT)
    p = tmp_path / "spaces.txt"  # .txt is read as comma-separated
    p.write_text("id ra dec vlos vlos_err\na 150 20 1 1\n")
    with pytest.raises(InputError, match="spaces.txt: missing .* is the file comma-separated"):
        read_catalogue(p, SAT)
    t = base_table(n_stars=2)  # 2 stars in 5 rows (epochs)
    assert len(t) == 5
    with pytest.raises(InputError, match="few.ecsv: only 2 star.*5 row.*at least 3"):
        read_catalogue(write(t, tmp_path / "few.ecsv"), SAT)


def test_star_opposite_the_centre_is_rejected():
    t = base_table()
    t["ra"][3], t["dec"][3] = 330.0, -20.0
    with pytest.raises(InputError, match=r"row 4, columns 'ra', 'dec'.* deg from the satellite"):
        stars_from_table(t, SAT, source="mem")


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


# ----------------------------------------------------------------------------- radii
def _offsets_by_rotation(ra, dec, ra0, dec0):
    """xi, eta [deg] by rotating unit vectors to the frame with the centre on the x axis and north
    on z (common practice); zenithal equidistant: radius = arc length, direction = position angle.
    """
    a, d, a0, d0 = map(np.deg2rad, (ra, dec, ra0, dec0))
    x, y, z = np.cos(d) * np.cos(a), np.cos(d) * np.sin(a), np.sin(d)
    x, y = x * np.cos(a0) + y * np.sin(a0), -x * np.sin(a0) + y * np.cos(a0)  # R_z(-a0)
    x, z = x * np.cos(d0) + z * np.sin(d0), -x * np.sin(d0) + z * np.cos(d0)  # R_y(d0)
    rho = np.rad2deg(np.arctan2(np.hypot(y, z), x))
    phi = np.arctan2(y, z)
    return rho * np.sin(phi), rho * np.cos(phi)


@pytest.mark.parametrize("ra0,dec0", [(150.0, 20.0), (10.0, 89.9), (359.95, -30.0), (0.2, -89.7)])
def test_offsets_against_rotation(ra0, dec0):
    rng = np.random.default_rng(5)
    c = SkyCoord(ra0 * u.deg, dec0 * u.deg).directional_offset_by(
        rng.uniform(0, 360, 200) * u.deg, rng.uniform(0, 1.0, 200) * u.deg
    )
    ra, dec = c.ra.deg, c.dec.deg
    off = projected_offsets(ra, dec, ra0, dec0)
    xi, eta = _offsets_by_rotation(ra, dec, ra0, dec0)
    np.testing.assert_allclose(off.xi_deg, xi, atol=1e-11)
    np.testing.assert_allclose(off.eta_deg, eta, atol=1e-11)
    np.testing.assert_allclose(off.radius_deg, np.hypot(xi, eta), atol=1e-11)  # e = 0


def test_offsets_where_flat_differences_fail():
    # across RA = 0: 0.1 deg of RA at dec -30 is 0.1 cos 30 deg to the east
    off = projected_offsets([0.05], [-30.0], 359.95, -30.0)
    assert off.xi_deg[0] == pytest.approx(0.1 * math.cos(math.radians(30.0)), rel=1e-5)
    assert (0.05 - 359.95) * math.cos(math.radians(30.0)) < -300  # the flat difference
    # over the pole: two points at dec 89.9 on opposite meridians are 0.2 deg apart, due north
    off = projected_offsets([190.0], [89.9], 10.0, 89.9)
    assert off.eta_deg[0] == pytest.approx(0.2, abs=1e-12) and abs(off.xi_deg[0]) < 1e-12
    flat = 180.0 * math.cos(math.radians(89.9))  # 0.314 deg, and in the wrong direction
    assert abs(flat - 0.2) > 0.1


def test_elliptical_radius_on_the_axes():
    e, pa = 0.5, 30.0
    centre = SkyCoord(150.0 * u.deg, 20.0 * u.deg)
    # (position angle, separation, hand-computed R_ell): major axis at PA 30 and 210; minor
    # axis at 120 and 300 scaled by 1 / (1 - e); 45 deg off: sqrt(cos^2 45 + sin^2 45 / 0.25)
    cases = [(30, 0.1, 0.1), (210, 0.1, 0.1), (120, 0.05, 0.1), (300, 0.05, 0.1),
             (75, 0.1, 0.1 * math.sqrt(2.5)), (0, 0.0, 0.0)]  # fmt: skip
    c = centre.directional_offset_by(
        [p for p, _, _ in cases] * u.deg, [s for _, s, _ in cases] * u.deg
    )
    off = projected_offsets(c.ra.deg, c.dec.deg, 150.0, 20.0, e, pa)
    want = np.array([r for _, _, r in cases])
    np.testing.assert_allclose(off.radius_ell_deg, want, rtol=1e-10, atol=1e-14)
    np.testing.assert_allclose(off.radius_deg, want * math.sqrt(1 - e), rtol=1e-10, atol=1e-14)


def test_radius_kpc_exact_tan_and_traceable():
    t = base_table()
    s = stars_from_table(t, SAT)
    d = 50.0
    want = d * np.tan(np.deg2rad(s.radius_deg))  # R = D tan(theta)
    np.testing.assert_allclose(s.radius_kpc(d), want, rtol=1e-15)
    np.testing.assert_allclose(
        s.radius_kpc(d, elliptical=True), d * np.tan(np.deg2rad(s.radius_ell_deg)), rtol=1e-15
    )
    assert angle_to_kpc(1.0, 100.0) == pytest.approx(100.0 * math.tan(math.pi / 180))
    # the small-angle form is within theta^2 / 3 (here < 1e-6)
    np.testing.assert_allclose(s.radius_kpc(d), d * np.deg2rad(s.radius_deg), rtol=1e-6)
    f = jax.jit(lambda dist: jnp.sum(s.radius_kpc(dist)))
    assert float(f(jnp.asarray(d))) == pytest.approx(want.sum(), rel=1e-14)
    assert float(jax.grad(f)(jnp.asarray(d))) == pytest.approx(want.sum() / d, rel=1e-14)


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
