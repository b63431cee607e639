"""The FITS file of a template: the TAN WCS in ICRS or Galactic coordinates (astropy), the cards
that describe the values, the held fraction of the whole halo, and the extensions SOLIDANG
(pixel solid angles), NORM (the map divided by its integral) and DRAWS (the draws averaged)."""

import numpy as np

from halo import __version__
from halo.core.fileio import atomic_path
from halo.core.vocabulary import HALO_TRUNCATION
from halo.products.jd_truncation import fits_truncation_cards
from halo.products.template_extent import HELD_TARGET

__all__ = ["write_template", "fits_wcs_header", "template_lines"]


def _centre(sat, frame):
    """(longitude, latitude) [deg] of the satellite centre in ``frame`` (astropy SkyCoord)."""
    if frame == "icrs":
        return sat.ra_deg, sat.dec_deg
    import astropy.units as u
    from astropy.coordinates import SkyCoord

    g = SkyCoord(sat.ra_deg * u.deg, sat.dec_deg * u.deg, frame="icrs").galactic
    return float(g.l.deg), float(g.b.deg)


def fits_wcs_header(sat, n_side, pixel_deg, frame="icrs"):
    """The TAN WCS of a square map centred on the satellite, in ICRS or Galactic coordinates."""
    from astropy.io import fits

    m = n_side // 2
    lon, lat = _centre(sat, frame)
    names = ("RA", "Dec") if frame == "icrs" else ("GLON", "GLAT")
    hdr = fits.Header()
    hdr["WCSAXES"] = 2
    hdr["CTYPE1"] = ("RA---TAN" if frame == "icrs" else "GLON-TAN", "gnomonic projection")
    hdr["CTYPE2"] = ("DEC--TAN" if frame == "icrs" else "GLAT-TAN", "gnomonic projection")
    hdr["CRPIX1"] = (m + 1.0, "the satellite centre (pixel centre)")
    hdr["CRPIX2"] = (m + 1.0, "the satellite centre (pixel centre)")
    hdr["CRVAL1"] = (lon, f"[deg] satellite {names[0]}")
    hdr["CRVAL2"] = (lat, f"[deg] satellite {names[1]}")
    hdr["CDELT1"] = (-pixel_deg, f"[deg] pixel side ({names[0]} increases to the left)")
    hdr["CDELT2"] = (pixel_deg, "[deg] pixel side")
    hdr["CUNIT1"] = "deg"
    hdr["CUNIT2"] = "deg"
    if frame == "icrs":
        hdr["RADESYS"] = "ICRS"
    hdr["OBJECT"] = sat.name
    return hdr


def _held_cards(hdr, kind, total, info):
    """How much of the whole halo's J (D) the map holds: the fraction and what it is of."""
    u_int = "GeV2 cm-5" if kind == "J" else "GeV cm-2"
    hdr[f"{kind}WHOLE"] = (info["whole"], f"[{u_int}] mean {kind} of the whole halo")
    hdr["WHOLEANG"] = (info["ref_deg"], "[deg] its cone half-angle (median over draws)")
    frac = total / info["whole"] if info["whole"] > 0 else float("nan")
    hdr[f"{kind}FRAC"] = (frac, f"{kind}INT / {kind}WHOLE: fraction the map holds")
    hdr["DEFSIZE"] = (info["default"], f"default size: holds >= {HELD_TARGET:g} of J?")
    for line in (
        f"{kind}WHOLE is {kind} of the halo inside its truncation radius r_t: the",
        "cone tangent to it, arcsin(r_t/d), at most 80 deg (untruncated haloes),",
        "mean over the NDRAWS draws. The default map is the smallest half-width",
        f"whose inscribed cone holds {HELD_TARGET:g} of JWHOLE (at most 30 deg).",
    ):
        hdr.add_comment(line)


def _template_cards(hdr, kind, values, omega, info, n_side):
    """The cards that describe one template (units, draws, solid angles, provenance)."""
    j = kind == "J"
    unit = "GeV2 cm-5 sr-1" if j else "GeV cm-2 sr-1"
    q = "dJ/dOmega" if j else "dD/dOmega"
    hdr["BUNIT"] = (unit, f"{q}, pixel average")
    hdr["MODEL"] = (info["model"], "halo model (spec name)")
    hdr["NDRAWS"] = (info["n_draws"], "posterior draws averaged")
    hdr["NPOST"] = (info["n_post"], "posterior draws in the run")
    hdr["SEED"] = (info["seed"], "seed of the draw selection")
    hdr["CONVERGD"] = (info["converged"], "the fit's convergence flag")
    hdr["PIXSA"] = (float(omega[n_side // 2, n_side // 2]), "[sr] central pixel solid angle")
    hdr["SADEV"] = (info["sa_dev"], "max |Omega_ij / PIXSA - 1| over the map")
    total = float(np.sum(values * omega))
    name = "JINT" if j else "DINT"
    u_int = "GeV2 cm-5" if j else "GeV cm-2"
    hdr[name] = (total, f"[{u_int}] {kind} on map: sum(value*SOLIDANG)")
    hdr["JMEAN05" if j else "DMEAN05"] = (
        info["mean05"],
        f"[{u_int}] mean {kind}(<0.5 deg) of these draws",
    )
    _held_cards(hdr, kind, total, info)
    hdr["HALFWID"] = (info["half_width"], "[deg] map half-width (to pixel edges)")
    hdr["INTERPER"] = (info["interp_err"], "max rel. error of the radial interpolation")
    if "interp_weighted" in info:
        hdr["INTERPJ"] = (info["interp_weighted"], f"the same, weighted by each radius's {kind}")
    hdr["CATSHA"] = info["catalogue_sha256"]  # the catalogue's sha256 (no room for a comment)
    hdr["RUNVER"] = (info["run_version"], "halo version of the fit")
    hdr["RUNDATE"] = (info["run_created"], "creation time of the fit")
    hdr["HALOVER"] = (__version__, "halo version of this export")
    for line in (
        f"Pixel value = {q} averaged over the pixel [{unit}],",
        f"i.e. the pixel's {kind} divided by its solid angle, for the mean over",
        "the NDRAWS posterior draws listed in extension DRAWS (chain, draw).",
        f"sum(value_ij * Omega_ij) = {kind} over the map = {name}; Omega_ij [sr] is",
        "exact for TAN and stored in extension SOLIDANG; sum(values) * PIXSA",
        "differs from it by at most SADEV (relative). Extension NORM = value /",
        f"{name} [sr-1]: the shape alone, sum(NORM_ij * Omega_ij) = 1.",
        f"Cone {kind} values: exact cone (not small-angle), each draw at its own",
        "distance. Central pixel (cusp): exact cone of the inscribed circle plus",
        "quadrature of the corners; see halo.products.export for the accuracy.",
    ):
        hdr.add_comment(line)
    # the map is built from the halo cut where the fit cut it (or not): TRUNC, TRUNCATD, COMMENT
    default = {"truncated": False, "statement": HALO_TRUNCATION}
    fits_truncation_cards(hdr, info.get("truncation") or default)
    return total


def write_template(path, *, kind, values, omega, info, sat, tg, frame, draw_table):
    """Write one template (primary map, SOLIDANG, NORM, DRAWS) atomically to ``path``."""
    from astropy.io import fits

    base = fits_wcs_header(sat, tg.n_side, tg.pixel_deg, frame)
    hdr = base.copy()
    total = _template_cards(hdr, kind, values, omega, info, tg.n_side)
    primary = fits.PrimaryHDU(data=values, header=hdr)
    sa_hdr = base.copy()
    sa_hdr["BUNIT"] = ("sr", "pixel solid angle")
    sa = fits.ImageHDU(data=omega, header=sa_hdr, name="SOLIDANG")
    norm_hdr = base.copy()
    norm_hdr["BUNIT"] = ("sr-1", f"primary / {kind}INT: sum(NORM*SOLIDANG) = 1")
    norm_hdr[f"{kind}INT"] = (total, "the normalisation divided out")
    norm = fits.ImageHDU(data=values / total, header=norm_hdr, name="NORM")
    draws = fits.BinTableHDU(draw_table, name="DRAWS")
    with atomic_path(path) as tmp:
        fits.HDUList([primary, sa, norm, draws]).writeto(tmp, overwrite=True)


def template_lines(paths):
    """One line per J template written: model, size, pixel, frame and the held fraction."""
    from astropy.io import fits

    lines = []
    for p in paths:
        if not str(p).endswith("_dj_domega.fits"):
            continue
        h = fits.getheader(p)
        frame = "ICRS" if h["CTYPE1"].startswith("RA") else "Galactic"
        lines.append(
            f"{h['MODEL']} template: half-width {h['HALFWID']:.3g} deg, {abs(h['CDELT1']):.3g} "
            f"deg pixels, {frame}, {h['NDRAWS']} draws; holds {100 * h['JFRAC']:.2f}% of the "
            "whole halo's J"
        )
    return lines
