"""Velocity catalogues: formats, columns, units, one-line rejections.

Epoch merging and warnings are tested in test_catalog_epochs.py, offsets and radii in
test_catalog_sky.py.
"""

import hashlib
import re

import astropy.units as u
import numpy as np
import pytest
from astropy.table import MaskedColumn
from astropy.time import Time
from catalog_setup import FORMATS, SAT, base_table, write

from halo.core.errors import InputError
from halo.inputs.catalogue import read_catalogue, stars_from_table
from halo.inputs.columns import parse_column_overrides

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
