"""dJ/dOmega and dD/dOmega templates of a dark model: the draw-averaged radial profile,
interpolated and averaged over the pixels of a TAN grid, written as FITS (see
:mod:`halo.products.export` for the conventions and the accuracy of each step)."""

import functools
import math
import textwrap
from typing import NamedTuple

import numpy as np

from halo import __version__
from halo.core.constants import DEG
from halo.core.errors import InputError
from halo.core.fileio import atomic_path
from halo.core.vocabulary import HALO_TRUNCATION
from halo.products.jd_draws import profile_draws
from halo.products.tan_pixels import pixel_average_radial

__all__ = ["TemplateGrid", "template_grid", "template_writers", "GRID_PER_EFOLD", "MAX_SIDE"]

#: nodes per e-fold of the angle grid on which dJ/dOmega is computed before interpolation
GRID_PER_EFOLD = 40
#: largest number of pixels along a side of a template
MAX_SIDE = 2001


class TemplateGrid(NamedTuple):
    """The pixel grid of a template and the angles [deg] its radial profile is computed at."""

    n_side: int
    pixel_deg: float
    grid: np.ndarray  # profile angles
    mids: np.ndarray  # their midpoints (to measure the interpolation error)

    @property
    def half_edges(self):
        """Half-width of the map [deg], to the pixel edges."""
        return (self.n_side // 2 + 0.5) * self.pixel_deg


def template_grid(half_width_deg, pixel_deg):
    """The :class:`TemplateGrid` of a map of the given half-width and pixel size."""
    m = math.ceil(half_width_deg / pixel_deg - 0.5 - 1e-9)
    n_side = 2 * m + 1
    if n_side > MAX_SIDE:
        raise InputError(
            f"template of half-width {half_width_deg:g} deg with {pixel_deg:g} deg pixels needs "
            f"{n_side} pixels per side (at most {MAX_SIDE}): give a larger pixel size"
        )
    corner = math.atan(math.sqrt(2.0) * (m + 0.5) * pixel_deg * DEG) / DEG
    lo, hi = 0.45 * pixel_deg, 1.02 * corner
    n = max(64, math.ceil(GRID_PER_EFOLD * math.log(hi / lo))) + 1
    ln = np.linspace(math.log(lo), math.log(hi), n)
    return TemplateGrid(n_side, pixel_deg, np.exp(ln), np.exp(0.5 * (ln[1:] + ln[:-1])))


class _LogLogSpline:
    """Cubic spline of ln f against ln theta over the positive values; 0 beyond the last one."""

    def __init__(self, theta, f):
        from scipy.interpolate import CubicSpline

        pos = np.flatnonzero(f > 0)
        last = pos[-1] if len(pos) else -1
        if last < 3 or not np.all(f[: last + 1] > 0):
            raise ValueError("profile not positive near the centre")
        self.lo, self.hi = theta[0], theta[last]
        self.spline = CubicSpline(np.log(theta[: last + 1]), np.log(f[: last + 1]))

    def __call__(self, theta):
        theta = np.asarray(theta, float)
        inside = theta <= self.hi
        x = np.log(np.clip(theta, self.lo, self.hi))
        return np.where(inside, np.exp(self.spline(x)), 0.0)


def _template(model, profiles, key, cone_key, tg):
    """(values, solid angles, interpolation error) of the draw-averaged profile ``key``."""
    n_grid = len(tg.grid)
    mean = profiles[key].mean(axis=0)
    f_grid, f_mid = mean[:n_grid], mean[n_grid:]
    try:
        spline = _LogLogSpline(tg.grid, f_grid)
    except ValueError:
        raise InputError(
            f"model '{model}': the mean {key} profile is not positive near the centre"
        ) from None
    mids = np.exp(0.5 * (np.log(tg.grid[1:]) + np.log(tg.grid[:-1])))
    ok = f_mid > 0
    interp_err = float(np.max(np.abs(spline(mids[ok]) / f_mid[ok] - 1.0)))
    central = float(profiles[cone_key][:, 0].mean())
    values, omega = pixel_average_radial(spline, central, tg.n_side, tg.pixel_deg)
    return values, omega, interp_err


def _template_draws(name, spec, satellite, draws, tg, n_template_draws, seed, where):
    """(picked draw indices, their profiles): a seeded random subset, the same for J and D, of
    the draws whose profiles are finite."""
    n_post = len(draws["distance"])
    rng = np.random.default_rng(seed)
    k = min(int(n_template_draws), n_post)
    pick = np.sort(rng.choice(n_post, size=k, replace=False))
    cone_in = math.atan(0.5 * tg.pixel_deg * DEG) / DEG
    prof = profile_draws(
        spec,
        satellite,
        {key: v[pick] for key, v in draws["values"].items()},
        draws["distance"][pick],
        draws["r_e"][pick],
        np.concatenate([tg.grid, tg.mids]),
        [cone_in, 0.5],
    )
    good = np.all(np.isfinite(prof["dj"]), axis=1) & np.all(np.isfinite(prof["j"]), axis=1)
    good &= np.all(np.isfinite(prof["dd"]), axis=1) & np.all(np.isfinite(prof["d"]), axis=1)
    if not good.any():
        raise InputError(
            f"{where}: model '{name}': J is infinite or undefined "
            "for every template draw (too steep a cusp?)"
        )
    return pick[good], {key: v[good] for key, v in prof.items()}


def _draw_table(draws, pick):
    import astropy.units as u
    from astropy.table import Table

    t = Table()
    t["chain"] = draws["chain"][pick]
    t["draw"] = draws["draw"][pick]
    t["distance"] = draws["distance"][pick]
    t["distance"].unit = u.kpc
    return t


def template_writers(name, spec, satellite, summary, draws, tg, n_template_draws, seed, where):
    """[("J", writer), ("D", writer)]: each writer(path) writes that template as FITS.

    ``draws``: {"chain", "draw", "distance", "r_e", "values"} over every posterior draw;
    ``where``: the posterior file, named in errors.
    """
    pick, prof = _template_draws(name, spec, satellite, draws, tg, n_template_draws, seed, where)
    draw_table = _draw_table(draws, pick)
    out = []
    for kind, key, cone_key in (("J", "dj", "j"), ("D", "dd", "d")):
        vals, omega, ierr = _template(name, prof, key, cone_key, tg)
        centre = omega[tg.n_side // 2, tg.n_side // 2]
        info = {
            "model": name,
            "n_draws": int(len(pick)),
            "n_post": int(len(draws["distance"])),
            "seed": int(seed),
            "converged": bool(summary["models"][name]["converged"]),
            "sa_dev": float(np.max(np.abs(omega / centre - 1.0))),
            "mean05": float(prof[cone_key][:, 1].mean()),
            "half_width": float(tg.half_edges),
            "interp_err": ierr,
            "catalogue_sha256": summary["catalogue"]["sha256"],
            "run_version": summary["version"],
            "run_created": summary["created"],
        }
        writer = functools.partial(
            _write_template,
            kind=kind,
            values=vals,
            omega=omega,
            info=info,
            sat=satellite,
            tg=tg,
            draw_table=draw_table,
        )
        out.append((kind, writer))
    return out


def _fits_header(sat, n_side, pixel_deg):
    from astropy.io import fits

    m = n_side // 2
    hdr = fits.Header()
    hdr["WCSAXES"] = 2
    hdr["CTYPE1"] = ("RA---TAN", "gnomonic projection")
    hdr["CTYPE2"] = ("DEC--TAN", "gnomonic projection")
    hdr["CRPIX1"] = (m + 1.0, "the satellite centre (pixel centre)")
    hdr["CRPIX2"] = (m + 1.0, "the satellite centre (pixel centre)")
    hdr["CRVAL1"] = (sat.ra_deg, "[deg] satellite RA")
    hdr["CRVAL2"] = (sat.dec_deg, "[deg] satellite Dec")
    hdr["CDELT1"] = (-pixel_deg, "[deg] pixel side (RA increases to the left)")
    hdr["CDELT2"] = (pixel_deg, "[deg] pixel side")
    hdr["CUNIT1"] = "deg"
    hdr["CUNIT2"] = "deg"
    hdr["RADESYS"] = "ICRS"
    hdr["OBJECT"] = sat.name
    return hdr


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
    hdr["HALFWID"] = (info["half_width"], "[deg] map half-width (to pixel edges)")
    hdr["INTERPER"] = (info["interp_err"], "max rel. error of the radial interpolation")
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
        "differs from it by at most SADEV (relative).",
        f"Cone {kind} values: exact cone (not small-angle), each draw at its own",
        "distance. Central pixel (cusp): exact cone of the inscribed circle plus",
        "quadrature of the corners; see halo.products.export for the accuracy.",
    ):
        hdr.add_comment(line)
    hdr["TRUNCATD"] = (False, "halo tidally truncated? no: see COMMENT")
    for line in textwrap.wrap(HALO_TRUNCATION, 70):
        hdr.add_comment(line)


def _write_template(path, *, kind, values, omega, info, sat, tg, draw_table):
    from astropy.io import fits

    base = _fits_header(sat, tg.n_side, tg.pixel_deg)
    hdr = base.copy()
    _template_cards(hdr, kind, values, omega, info, tg.n_side)
    primary = fits.PrimaryHDU(data=values, header=hdr)
    sa_hdr = base.copy()
    sa_hdr["BUNIT"] = ("sr", "pixel solid angle")
    sa = fits.ImageHDU(data=omega, header=sa_hdr, name="SOLIDANG")
    draws = fits.BinTableHDU(draw_table, name="DRAWS")
    with atomic_path(path) as tmp:
        fits.HDUList([primary, sa, draws]).writeto(tmp, overwrite=True)
