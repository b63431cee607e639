"""dJ/dOmega and dD/dOmega templates of a dark model: the draw-averaged radial profile,
interpolated and averaged over the pixels of a TAN grid (its extent from
:mod:`halo.products.template_extent`), written as FITS by :mod:`halo.products.template_fits`
(see :mod:`halo.products.export` for the conventions and the accuracy of each step)."""

import functools
import math

import numpy as np

from halo.core.constants import DEG
from halo.core.errors import InputError
from halo.products.jd_draws import profile_draws, whole_halo_draws
from halo.products.tan_pixels import pixel_average_radial
from halo.products.template_extent import (
    HALF_WIDTHS,
    choose_half_width,
    default_pixel,
    inscribed_cone_deg,
    template_grid,
)
from halo.products.template_fits import write_template

__all__ = ["template_writers"]


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
    s_mid = spline(mids)
    interp_err = float(np.max(np.abs(s_mid[ok] / f_mid[ok] - 1.0)))
    # weighted by each midpoint's share of J (dOmega ~ theta^2 dln theta on the log grid): what a
    # truncated halo's edge (where the mean profile falls to zero) costs the map as a whole
    w = mids**2
    interp_j = float(np.sum(np.abs(s_mid - f_mid) * w) / np.sum(np.abs(f_mid) * w))
    central = float(profiles[cone_key][:, 0].mean())
    values, omega = pixel_average_radial(spline, central, tg.n_side, tg.pixel_deg)
    return values, omega, (interp_err, interp_j)


def _pick(n_post, n_template_draws, seed):
    """A seeded random subset of the posterior draws, sorted."""
    rng = np.random.default_rng(seed)
    k = min(int(n_template_draws), n_post)
    return np.sort(rng.choice(n_post, size=k, replace=False))


def _subset(draws, idx):
    """The (values, distance, r_e) of the draws ``idx``."""
    vals = {key: v[idx] for key, v in draws["values"].items()}
    return vals, draws["distance"][idx], draws["r_e"][idx]


def _extent(spec, satellite, draws, pick, opts, floor_deg):
    """(grid, kept draws, their whole-halo J and D): the map's half-width is the option, or the
    smallest of HALF_WIDTHS (at least ``floor_deg``) that holds HELD_TARGET of the mean J."""
    cones = [inscribed_cone_deg(h) for h in HALF_WIDTHS]
    whole = whole_halo_draws(
        spec, satellite, *_subset(draws, pick), cones, r_cut=draws["r_cut"][pick]
    )
    ok = np.isfinite(whole["j_all"]) & np.isfinite(whole["d_all"])
    ok &= np.all(np.isfinite(whole["j"]), axis=1)
    half = opts.half_width_deg
    if half is None and ok.any():
        j_cones = whole["j"][ok].mean(axis=0)
        half = choose_half_width(j_cones, whole["j_all"][ok].mean(), floor_deg)
    elif half is None:
        half = floor_deg
    pixel = default_pixel(half) if opts.pixel_deg is None else opts.pixel_deg
    if pixel > half:
        raise InputError(
            f"--pixel-deg: must be at most the half-width ({half:g} deg), got {pixel:g}"
        )
    return template_grid(half, pixel), ok, whole


def _template_draws(name, spec, satellite, draws, opts, floor_deg, where):
    """(grid, picked draw indices, their profiles and whole-halo J, D): a seeded random subset,
    the same for J and D, of the draws whose profiles are finite."""
    pick = _pick(len(draws["distance"]), opts.n_draws, opts.seed)
    tg, ok, whole = _extent(spec, satellite, draws, pick, opts, floor_deg)
    cone_in = math.atan(0.5 * tg.pixel_deg * DEG) / DEG
    prof = profile_draws(
        spec,
        satellite,
        *_subset(draws, pick),
        np.concatenate([tg.grid, tg.mids]),
        [cone_in, 0.5],
        r_cut=draws["r_cut"][pick],
    )
    good = ok & np.all(np.isfinite(prof["dj"]), axis=1) & np.all(np.isfinite(prof["j"]), axis=1)
    good &= np.all(np.isfinite(prof["dd"]), axis=1) & np.all(np.isfinite(prof["d"]), axis=1)
    if not good.any():
        raise InputError(
            f"{where}: model '{name}': J is infinite or undefined "
            "for every template draw (too steep a cusp?)"
        )
    prof = {key: v[good] for key, v in prof.items()}
    prof.update(j_all=whole["j_all"][good], d_all=whole["d_all"][good])
    prof["ref_deg"] = whole["ref_deg"][good]
    return tg, pick[good], prof


def _draw_table(draws, pick):
    import astropy.units as u
    from astropy.table import Table

    t = Table()
    t["chain"] = draws["chain"][pick]
    t["draw"] = draws["draw"][pick]
    t["distance"] = draws["distance"][pick]
    t["distance"].unit = u.kpc
    return t


def template_writers(name, spec, satellite, summary, draws, opts, floor_deg, where):
    """[("J", writer), ("D", writer)]: each writer(path) writes that template as FITS.

    ``draws``: {"chain", "draw", "distance", "r_e", "values", "r_cut", "truncation"} over
    every posterior draw (``r_cut`` [kpc] the halo's cut per draw, inf for none);
    ``opts``: checked :class:`halo.products.template_extent.TemplateOptions`; ``floor_deg``:
    the smallest default half-width; ``where``: the posterior file, named in errors.
    """
    tg, pick, prof = _template_draws(name, spec, satellite, draws, opts, floor_deg, where)
    draw_table = _draw_table(draws, pick)
    out = []
    for kind, key, cone_key in (("J", "dj", "j"), ("D", "dd", "d")):
        vals, omega, ierr = _template(name, prof, key, cone_key, tg)
        centre = omega[tg.n_side // 2, tg.n_side // 2]
        info = {
            "model": name,
            "n_draws": int(len(pick)),
            "n_post": int(len(draws["distance"])),
            "seed": int(opts.seed),
            "converged": bool(summary["models"][name]["converged"]),
            "sa_dev": float(np.max(np.abs(omega / centre - 1.0))),
            "mean05": float(prof[cone_key][:, 1].mean()),
            "whole": float(prof[f"{cone_key}_all"].mean()),
            "ref_deg": float(np.median(prof["ref_deg"])),
            "default": opts.half_width_deg is None,
            "half_width": float(tg.half_edges),
            "interp_err": ierr[0],
            "interp_weighted": ierr[1],
            "catalogue_sha256": summary["catalogue"]["sha256"],
            "run_version": summary["version"],
            "run_created": summary["created"],
            "truncation": draws["truncation"],
        }
        writer = functools.partial(
            write_template,
            kind=kind,
            values=vals,
            omega=omega,
            info=info,
            sat=satellite,
            tg=tg,
            frame=opts.frame,
            draw_table=draw_table,
        )
        out.append((kind, writer))
    return out
