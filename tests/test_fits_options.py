"""FITS templates of `halo export`: the default map holds >= 99% of the whole halo's J (checked
against an independent scipy integral of the line-of-sight rho^2), the NORM extension, the
Galactic-frame WCS (astropy SkyCoord), and the options --half-width-deg, --pixel-deg,
--template-draws, --frame with errors that name them.

The run folder is built by hand (no sampler): three identical NFW draws, so that the template's
single draw is known."""

import json
import math

import arviz as az
import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import SkyCoord
from astropy.io import fits
from astropy.wcs import WCS
from export_setup import SAT, run_summary
from scipy import integrate

from halo.cli.app import main
from halo.physics.cosmology import rho_crit
from halo.products.export import export_run
from halo.products.template_extent import HALF_WIDTHS, HELD_TARGET

M200, C200, DIST = 1.0e9, 20.0, 60.0  # [Msun], r200 / r_s, [kpc]
DEG = math.pi / 180.0


def _posterior():
    shape = (1, 3)
    lm = np.full(shape, math.log10(M200))
    return {
        "log10_m200": lm,
        "m200": 10.0**lm,
        "c200": np.full(shape, C200),
        "beta": np.zeros(shape),
        "distance": np.full(shape, DIST),
        "r_e_kpc": np.full(shape, 0.04),
        "m_star": np.full(shape, 1.0e4),
        "v_sys": np.zeros(shape),
    }


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    root = tmp_path_factory.mktemp("fitsopt") / "run"
    (root / "nfw").mkdir(parents=True)
    az.from_dict({"posterior": _posterior()}).to_netcdf(str(root / "nfw" / "posterior.nc"))
    (root / "summary.json").write_text(json.dumps(run_summary()))
    return root


@pytest.fixture(scope="module")
def default_map(run):
    out = run.parent / "default"
    export_run(run, out, n_template_draws=1)
    with fits.open(out / "nfw_dj_domega.fits") as hdul:
        return {k: (np.array(h.data), h.header.copy()) for k, h in zip("PSND", hdul, strict=True)}


# ------------------------------------------------------------------ independent reference


def _nfw():
    """(rho_s [Msun kpc^-3], r_s [kpc]) from M200, c200: r200 = (3 M200 / (800 pi rho_c))^(1/3),
    rho_s = M200 / (4 pi r_s^3 (ln(1 + c) - c / (1 + c))) (Navarro, Frenk & White 1997, ApJ 490,
    493, eqs. 1-3); rho_c of the project's cosmology (astropy Planck18)."""
    r200 = (3.0 * M200 / (800.0 * math.pi * rho_crit())) ** (1.0 / 3.0)
    r_s = r200 / C200
    rho_s = M200 / (4.0 * math.pi * r_s**3 * (math.log1p(C200) - C200 / (1.0 + C200)))
    return rho_s, r_s


RHO_S, R_S = _nfw()


def _los(theta):
    """Int_0^inf rho^2 dl along the line of sight at angle theta [rad] (scipy quad): with
    l = d cos(theta) + b sinh(t), b = d sin(theta), r = b cosh(t) and dl = r dt."""
    b, l0 = DIST * math.sin(theta), DIST * math.cos(theta)

    def f(t):
        x = b * math.cosh(t) / R_S
        return (RHO_S / (x * (1.0 + x) ** 2)) ** 2 * b * math.cosh(t)

    t_hi = math.asinh(1e4 * DIST / b)
    return integrate.quad(f, -math.asinh(l0 / b), t_hi, epsabs=0.0, epsrel=1e-11, limit=400)[0]


def _cone(theta):
    """J in a cone of half-angle theta [rad]: 2 pi Int_0^theta sin(t) Int_los rho^2 dl dt, in
    ln t from 1e-9 rad (what lies inside is ~1e-9 of J: the integrand tends to a constant)."""
    g = lambda s: _los(math.exp(s)) * math.sin(math.exp(s)) * math.exp(s)  # noqa: E731
    return 2.0 * math.pi * integrate.quad(g, math.log(1e-9), math.log(theta), epsrel=1e-10)[0]


def _square(a):
    """J over the TAN square of half-side a (tangent-plane units): by symmetry
    (4 / pi) Int_0^{pi/4} J_cone(arctan(a / cos phi)) dphi, since the cone of a tangent-plane
    radius rho is arctan(rho) (Calabretta & Greisen 2002, A&A 395, 1077, eq. 54)."""
    g = lambda phi: _cone(math.atan(a / math.cos(phi)))  # noqa: E731
    return 4.0 / math.pi * integrate.quad(g, 0.0, math.pi / 4, epsrel=1e-9)[0]


def _gev2_cm5():
    """Msun^2 kpc^-5 in GeV^2 cm^-5 (astropy constants: M_sun c^2 in GeV)."""
    msun = (const.M_sun * const.c**2).to(u.GeV).value
    return msun**2 / u.kpc.to(u.cm) ** 5


# ----------------------------------------------------------------------------- tests


def test_default_map_holds_99_percent_of_the_whole_halo(default_map):
    data, hdr = default_map["P"]
    whole = _cone(80.0 * DEG)  # untruncated: the whole halo is the 80 deg cone
    a = hdr["HALFWID"] * DEG  # to the pixel edges, tangent-plane units
    held = _square(a) / whole
    print(f"default map: {hdr['HALFWID']} deg, JFRAC {hdr['JFRAC']:.9f}, scipy {held:.9f}")
    assert hdr["WHOLEANG"] == pytest.approx(80.0, rel=1e-12)
    assert hdr["JWHOLE"] == pytest.approx(whole * _gev2_cm5(), rel=1e-6)
    assert hdr["JFRAC"] == pytest.approx(held, abs=1e-6)
    assert hdr["JFRAC"] >= HELD_TARGET and hdr["DEFSIZE"] is True
    # the smallest such map: the next smaller half-width's inscribed cone holds less than 99%
    k = HALF_WIDTHS.index(round(hdr["HALFWID"] - 0.5 * hdr["CDELT2"], 9))
    assert _cone(math.atan(HALF_WIDTHS[k - 1] * DEG)) / whole < HELD_TARGET
    # the former default, 2 x 2 deg (1.005 deg to the pixel edges), held less
    old = _square(1.005 * DEG) / whole
    print(f"former 2 x 2 deg default: held fraction {old:.4f}")
    assert old < HELD_TARGET


def test_norm_extension(default_map):
    data, hdr = default_map["P"]
    omega, _ = default_map["S"]
    norm, nhdr = default_map["N"]
    assert nhdr["BUNIT"] == "sr-1" and nhdr["EXTNAME"] == "NORM"
    assert np.sum(norm * omega) == pytest.approx(1.0, rel=1e-12)
    np.testing.assert_allclose(norm * hdr["JINT"], data, rtol=1e-14)


def test_galactic_frame_and_options_from_the_cli(run, default_map, capsys):
    out = run.parent / "galactic"
    assert main(["export", str(run), "--out", str(out), "--frame", "Galactic"]) == 0
    assert "holds" in capsys.readouterr().out
    with fits.open(out / "nfw_dj_domega.fits") as hdul:
        data, hdr = np.array(hdul[0].data), hdul[0].header.copy()
    icrs_data, icrs_hdr = default_map["P"]
    assert hdr["NDRAWS"] == 3 and hdr["CTYPE1"] == "GLON-TAN" and "RADESYS" not in hdr
    # the map is radial about the centre, so the frame only turns the grid: same pixel values
    np.testing.assert_array_equal(data, icrs_data)
    w = WCS(hdr)
    c = int(hdr["CRPIX1"]) - 1
    centre = w.pixel_to_world(c, c)
    assert centre.frame.name == "galactic"
    # astropy's Galactic -> ICRS transformation of the map centre gives the satellite's RA, Dec
    sat = SkyCoord(SAT["ra_deg"] * u.deg, SAT["dec_deg"] * u.deg, frame="icrs")
    assert centre.icrs.separation(sat).to(u.arcsec).value < 1e-6
    corner = w.pixel_to_world(0, 0).icrs.separation(sat).deg
    icrs_corner = WCS(icrs_hdr).pixel_to_world(0, 0).separation(sat).deg
    assert corner == pytest.approx(icrs_corner, rel=1e-10)
    assert corner == pytest.approx(math.atan(math.sqrt(2) * c * hdr["CDELT2"] * DEG) / DEG)


def test_size_pixel_and_draws_options(run, capsys):
    out = run.parent / "small"
    args = ["export", str(run), "--out", str(out), "--half-width-deg", "0.5"]
    assert main([*args, "--pixel-deg", "0.02", "--template-draws", "2"]) == 0
    line = [x for x in capsys.readouterr().out.splitlines() if "template:" in x][0]
    hdr = fits.getheader(out / "nfw_dd_domega.fits")
    assert hdr["NAXIS1"] == 51 and hdr["CDELT2"] == 0.02 and hdr["NDRAWS"] == 2
    assert hdr["HALFWID"] == pytest.approx(0.51) and hdr["DEFSIZE"] is False
    assert hdr["CTYPE1"] == "RA---TAN" and 0 < hdr["DFRAC"] < 1
    jh = fits.getheader(out / "nfw_dj_domega.fits")
    assert f"holds {100 * jh['JFRAC']:.2f}%" in line and jh["JFRAC"] < HELD_TARGET


@pytest.mark.parametrize(
    ("extra", "flag"),
    [
        (["--half-width-deg", "40"], "--half-width-deg"),
        (["--half-width-deg", "0"], "--half-width-deg"),
        (["--pixel-deg", "0"], "--pixel-deg"),
        (["--half-width-deg", "1", "--pixel-deg", "2"], "--pixel-deg"),
        (["--half-width-deg", "20", "--pixel-deg", "0.005"], "--pixel-deg"),
        (["--template-draws", "0"], "--template-draws"),
        (["--frame", "fk5"], "--frame"),
    ],
)
def test_bad_options_name_the_flag(run, tmp_path, capsys, extra, flag):
    out = tmp_path / "out"
    assert main(["export", str(run), "--out", str(out), *extra]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and flag in err and "Traceback" not in err
    assert not out.exists()
