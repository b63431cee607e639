"""Export a fit's J- and D-factors: tables for joint-likelihood analyses and spatial templates.

``export_run(RUN, OUT)`` reads a fit output folder (``RUN/summary.json`` and
``RUN/<model>/posterior.nc``, written by :func:`halo.pipeline.fit.fit`) and writes into OUT::

    OUT/jd_factors.ecsv          one row per (model, cone half-angle): quantiles, mean and std of
                                 log10 J and log10 D, and the linear posterior means of J and D
    OUT/<model>_draws.ecsv       per posterior draw: chain, draw, distance, log10 J and log10 D
    OUT/<model>_dj_domega.fits   dJ/dOmega template on a TAN grid centred on the satellite
    OUT/<model>_dd_domega.fits   dD/dOmega template, same grid
    OUT/summary.json             a byte copy of the run's summary

Models without a dark halo (``stars-only``) are skipped. Every draw uses its own distance, so the
distance uncertainty is propagated through the posterior.

Conventions: J(theta) = Int_cone dOmega Int_los rho^2 dl and
D(theta) = Int_cone dOmega Int_los rho dl in a cone of half-angle theta (solid angle
2 pi (1 - cos theta)), computed exactly (no small-angle or cylinder approximation) by
:mod:`halo.physics.jfactor`. Units: J in GeV^2 cm^-5, D in GeV cm^-2;
templates in GeV^2 cm^-5 sr^-1 and GeV cm^-2 sr^-1.

Templates: a pixel's value is dJ/dOmega averaged over the pixel (the pixel's J divided by its solid
angle), so sum_ij value_ij Omega_ij is J over the map. The pixel solid angles Omega_ij of the
gnomonic (TAN) grid are exact (closed form) and stored in the ``SOLIDANG`` extension; header card
PIXSA holds the central pixel's solid angle and SADEV the largest relative deviation of any pixel's
solid angle from PIXSA, i.e. the error of the shortcut sum(pixels) * PIXSA. The ``DRAWS`` extension
lists the posterior draws averaged.

Accuracy of each numerical step
-------------------------------
1. log10 J and log10 D per draw: :func:`halo.physics.jfactor.log10_j` / ``log10_d`` (exact cone); relative
   error of J and D < 1e-12 for NFW and Burkert haloes, < 3e-7 for Einasto and Zhao haloes.
2. Table summaries: :func:`halo.core.quantiles.quantiles` (numpy percentiles with linear interpolation)
   over the finite draws; their uncertainty is the posterior's Monte Carlo error, not reduced here.
   The linear means are means of 10**log10 over the same draws (float64 rounding only).
3. dJ/dOmega and dD/dOmega per template draw: :func:`halo.physics.jfactor.dj_domega` / ``dd_domega``,
   relative error < 1e-10 (0.0001-60 deg), on a logarithmic grid of angles (:data:`GRID_PER_EFOLD`
   nodes per e-fold) from 0.45 pixel to beyond the map's corner; the template is the mean over
   ``n_template_draws`` posterior draws (seeded), whose Monte Carlo error is
   std(J) / sqrt(n_template_draws) in J.
4. Interpolation of the draw-averaged profile: cubic spline in (ln theta, ln dJ/dOmega); its error
   is measured at every grid midpoint against the direct mean and stored in header card INTERPER
   (3e-9 for dJ/dOmega, 1.4e-9 for dD/dOmega of the NFW test haloes; larger, locally, where a
   truncated halo's edge lies in the map).
5. Pixel averages (the cusp): for the central pixel, the exact cone J of its inscribed circle
   (step 1 accuracy) plus the four corners by 32-node Gauss-Legendre quadrature in polar
   coordinates (r = h cosh t removes the square-root kink); pixels within
   :data:`INNER_PIXELS` of the centre by 12 x 12 Gauss-Legendre nodes, the rest by 4 x 4 nodes, each
   node weighted by the TAN Jacobian (1 + xi^2 + eta^2)^(-3/2). For a 1/theta cusp (NFW J) the
   relative error per pixel is < 1e-10 (measured against scipy dblquad; the tests require 1e-9,
   and 1e-6 for the exported template's central pixels, interpolation included).
6. Pixel solid angles: exact closed form for a gnomonic rectangle (rounding < 1e-11 relative).
7. Summing pixels whose centres lie within a cone approximates the cone by whole pixels: the
   error depends on pixel size; with 0.01 deg pixels, for the NFW test haloes of
   tests/test_export.py, 2e-4 (J) and 8e-4 (D) at 0.5 deg, 3e-3 (J) and 7e-3 (D) at 0.1 deg.
   This is a property of the pixel grid, not of the template values.
"""

import json
import math
import shutil
from pathlib import Path

import jax
import jax.numpy as jnp
import numpy as np

from halo import __version__
from halo.core.constants import DEG, MSUN2_KPC5_TO_GEV2_CM5, MSUN_KPC2_TO_GEV_CM2
from halo.core.errors import InputError
from halo.core.fileio import atomic_path, read_input_text
from halo.inputs.build import build_mass_model
from halo.inputs.satellite import parse_satellite
from halo.inputs.spec import load_spec
from halo.physics.cosmology import rho_crit
from halo.physics.jfactor import d_factor, dd_domega, dj_domega, j_factor, log10_d, log10_j
from halo.results.derived import STANDARD_ANGLES, parameter_values, quantiles

__all__ = [
    "export_run",
    "read_run",
    "read_posterior",
    "tan_pixel_solid_angles",
    "pixel_average_radial",
    "GRID_PER_EFOLD",
    "INNER_PIXELS",
    "MAX_SIDE",
]

STARS_ONLY = "stars-only"
#: nodes per e-fold of the angle grid on which dJ/dOmega is computed before interpolation
GRID_PER_EFOLD = 40
#: pixels whose offset from the centre is at most this (in both axes) get 12 x 12 nodes
INNER_PIXELS = 4
#: largest number of pixels along a side of a template
MAX_SIDE = 2001
#: largest template half-width [deg] (the TAN grid's distortion stays moderate)
MAX_HALF_WIDTH = 30.0
#: posterior sites every dark model needs besides the spec's parameters
_NUISANCE_SITES = ("distance", "r_e_kpc", "m_star")
_Q = ("median", "p16", "p84", "p2.5", "p97.5", "mean", "std")
_CONVENTIONS = (
    "J(theta) = Int_cone dOmega Int_los rho^2 dl and D(theta) = Int_cone dOmega Int_los rho dl "
    "in a cone of half-angle angle_deg around the satellite centre (solid angle "
    "2 pi (1 - cos theta)), "
    "computed for the exact cone (no small-angle approximation). Each posterior draw uses its own "
    "distance, so the distance uncertainty is propagated. log10_* columns summarise log10 J or "
    "log10 D (median, 16/84 and 2.5/97.5 percentiles, mean and standard deviation of log10, "
    "i.e. a log-normal summary); j_mean and d_mean are posterior means of J and D (linear)."
)


# ----------------------------------------------------------------------------- reading a run


def _run_error(path, msg):
    return InputError(f"{path}: {msg}")


def read_run(run_dir):
    """(summary dict, satellite, {model: spec}) of a fit output folder; dark models only.

    Raises :class:`halo.core.errors.InputError` (one line, naming the file and key) when the folder,
    its ``summary.json`` or a model's spec cannot be used.
    """
    run_dir = Path(run_dir)
    if not run_dir.is_dir():
        raise InputError(f"{run_dir}: no such run folder")
    path = run_dir / "summary.json"
    text = read_input_text(path, "no such file (not a fit output folder?)")
    try:
        summary = json.loads(text)
    except json.JSONDecodeError as exc:
        raise _run_error(path, f"not valid JSON (line {exc.lineno}, column {exc.colno})") from None
    if not isinstance(summary, dict):
        raise _run_error(path, "top level must be an object")
    for key, kind in (
        ("version", str),
        ("created", str),
        ("satellite", dict),
        ("catalogue", dict),
        ("models", dict),
    ):
        if key not in summary:
            raise _run_error(path, f"missing key '{key}'")
        if not isinstance(summary[key], kind):
            raise _run_error(path, f"key '{key}' must be a {'string' if kind is str else 'table'}")
    if not isinstance(summary["catalogue"].get("sha256"), str):
        raise _run_error(path, "missing key 'catalogue.sha256'")
    satellite = parse_satellite(summary["satellite"], source=f"{path} key 'satellite'")
    specs = {}
    for name, entry in summary["models"].items():
        if name == STARS_ONLY:
            continue
        if not isinstance(entry, dict):
            raise _run_error(path, f"key 'models.{name}' must be a table")
        if not isinstance(entry.get("converged"), bool):
            raise _run_error(path, f"key 'models.{name}.converged' must be true or false")
        spec = _load_model_spec(name, entry.get("spec_source"), path)
        if spec.has_dark:
            specs[name] = spec
    if not specs:
        raise _run_error(path, "no model with a dark halo to export")
    return summary, satellite, specs


def _load_model_spec(name, source, where):
    """The model's spec: the recorded spec file when it is a user file, else the shipped name."""
    shipped = source is None or str(source) == f"models/{name}.toml"
    if not shipped and Path(str(source)).is_file():
        return load_spec(Path(str(source)))
    try:
        return load_spec(name)
    except InputError as exc:
        raise _run_error(
            where, f"key 'models.{name}': cannot load its spec (spec_source {source!r}: {exc})"
        ) from None


def read_posterior(path, sites):
    """{site: array (chain, draw)} of the posterior group of an arviz netCDF file.

    ``sites`` are the variables needed; each must have dims exactly (chain, draw).
    """
    import xarray as xr

    path = Path(path)
    if not path.is_file():
        raise _run_error(path, "no such file")
    try:
        with xr.open_datatree(path) as tree:
            if "posterior" not in tree.children:
                raise _run_error(path, "no 'posterior' group")
            ds = tree["posterior"].to_dataset()
            out = {}
            for s in sites:
                if s not in ds.data_vars:
                    raise _run_error(path, f"group 'posterior' has no variable '{s}'")
                var = ds[s]
                if var.dims != ("chain", "draw"):
                    raise _run_error(
                        path, f"variable '{s}' must have dims (chain, draw), got {var.dims}"
                    )
                out[s] = np.asarray(var.values, dtype=float)
    except InputError:
        raise
    except Exception as exc:  # noqa: BLE001  (netCDF/HDF5 readers raise many kinds)
        raise _run_error(path, f"cannot read as netCDF ({exc.__class__.__name__})") from None
    for s, v in out.items():
        if not np.all(np.isfinite(v)):
            raise _run_error(path, f"variable '{s}' has non-finite values")
    return out


def _needed_sites(spec):
    names = [k for k, p in spec.parameters.items() if p["prior"] != "fixed"]
    return list(dict.fromkeys(names + list(_NUISANCE_SITES)))


# ----------------------------------------------------------------------------- per-draw maps


def _map_draws(one, values, distance, r_e, batch):
    """jit(vmap(one)) over draws in chunks (as :func:`halo.results.derived.derive`); numpy results."""
    fn = jax.jit(jax.vmap(one))
    n = len(distance)
    batch = min(batch, n)
    chunks = []
    for k in range(0, n, batch):
        # the last chunk is padded with its last draw so that every call has one shape (one
        # compilation); the padding is cut off below
        idx = np.minimum(np.arange(k, k + batch), n - 1)
        vals = {key: jnp.asarray(np.asarray(v)[idx]) for key, v in values.items()}
        out = fn(vals, jnp.asarray(distance[idx]), jnp.asarray(r_e[idx]))
        keep = min(batch, n - k)
        chunks.append({key: np.asarray(v)[:keep] for key, v in out.items()})
    return {key: np.concatenate([c[key] for c in chunks]) for key in chunks[0]}


def _dark_of(spec, satellite, rho_c):
    def dark(vals, re):
        _, d = build_mass_model(spec, vals, satellite.light(re), rho_c)
        return d

    return dark


def _jd_draws(spec, satellite, values, distance, r_e, angles, batch=1000):
    """log10 J [GeV^2 cm^-5] and log10 D [GeV cm^-2], arrays (draws, angles)."""
    dark_of = _dark_of(spec, satellite, rho_crit())
    th = jnp.asarray(angles, float)

    def one(vals, d, re):
        dark = dark_of(vals, re)
        return {"log10_j": log10_j(dark, d, th), "log10_d": log10_d(dark, d, th)}

    return _map_draws(one, values, distance, r_e, batch)


def _profile_draws(spec, satellite, values, distance, r_e, grid_deg, cone_deg, batch=32):
    """Per draw: dJ/dOmega, dD/dOmega on ``grid_deg`` and J, D in cones ``cone_deg`` (GeV, cm)."""
    dark_of = _dark_of(spec, satellite, rho_crit())
    grid = jnp.asarray(grid_deg, float)
    cones = jnp.asarray(cone_deg, float)

    def one(vals, d, re):
        dark = dark_of(vals, re)
        return {
            "dj": dj_domega(dark, d, grid) * MSUN2_KPC5_TO_GEV2_CM5,
            "dd": dd_domega(dark, d, grid) * MSUN_KPC2_TO_GEV_CM2,
            "j": j_factor(dark, d, cones) * MSUN2_KPC5_TO_GEV2_CM5,
            "d": d_factor(dark, d, cones) * MSUN_KPC2_TO_GEV_CM2,
        }

    return _map_draws(one, values, distance, r_e, batch)


# ----------------------------------------------------------------------------- TAN pixel grid


def _s_rect(a, b):
    """Solid angle of the gnomonic rectangle [0, a] x [0, b] (tangent-plane units), signed."""
    return np.arctan(a * b / np.sqrt(1.0 + a * a + b * b))


def tan_pixel_solid_angles(n_side, pixel_deg):
    """Exact solid angles [sr] of the pixels of a square TAN grid centred on the tangent point.

    Parameters
    ----------
    n_side : int, odd, pixels per side (the tangent point is the centre of the central pixel)
    pixel_deg : float, pixel side in intermediate world coordinates [deg]

    Returns
    -------
    array (n_side, n_side)

    Notes
    -----
    In the gnomonic projection the intermediate coordinates (in radians) are tangent-plane
    coordinates xi = tan(theta) cos(phi), eta = tan(theta) sin(phi) (Calabretta & Greisen 2002,
    A&A 395, 1077, eq. 54), and dOmega = dxi deta / (1 + xi^2 + eta^2)^(3/2). The rectangle
    [0, a] x [0, b] subtends arctan(a b / sqrt(1 + a^2 + b^2)) (common practice), so a pixel's
    solid angle is a double difference of that closed form; rounding error < 1e-11 relative for
    grids up to 30 deg.
    """
    m = n_side // 2
    edges = (np.arange(n_side + 1) - m - 0.5) * pixel_deg * DEG
    s = _s_rect(edges[:, None], edges[None, :])
    return s[1:, 1:] - s[:-1, 1:] - s[1:, :-1] + s[:-1, :-1]


def _gauss(n):
    return np.polynomial.legendre.leggauss(n)


def _block_average(func, offsets_a, offsets_b, h, order):
    """Int over pixels (a, b) of func(theta_deg) dOmega by order x order Gauss-Legendre nodes.

    ``offsets_*``: integer pixel offsets from the centre; ``h``: half a pixel (tangent-plane units).
    """
    x, w = _gauss(order)
    xi = (2.0 * np.asarray(offsets_a, float)[:, None] + x[None, :]) * h  # (A, q)
    eta = (2.0 * np.asarray(offsets_b, float)[:, None] + x[None, :]) * h  # (B, q)
    rho2 = xi[:, :, None, None] ** 2 + eta[None, None, :, :] ** 2  # (A, q, B, q)
    theta = np.arctan(np.sqrt(rho2)) / DEG
    f = func(theta) * (1.0 + rho2) ** -1.5
    return h * h * np.einsum("aibj,i,j->ab", f, w, w)


def _centre_corners(func, h, order=32):
    """Int of func(theta_deg) dOmega over the central pixel minus its inscribed circle.

    Polar coordinates on the tangent plane, rho = h cosh t (t from 0 to arccosh sqrt 2); the
    arc of radius rho inside the square is 2 pi - 8 arccos(h / rho) = 2 pi - 8 arctan(sinh t).
    """
    x, w = _gauss(order)
    t_hi = math.acosh(math.sqrt(2.0))
    t = 0.5 * t_hi * (1.0 + x)
    rho = h * np.cosh(t)
    arc = 2.0 * np.pi - 8.0 * np.arctan(np.sinh(t))
    theta = np.arctan(rho) / DEG
    integrand = func(theta) * arc * rho * h * np.sinh(t) * (1.0 + rho * rho) ** -1.5
    return 0.5 * t_hi * float(np.sum(w * integrand))


def pixel_average_radial(func, central_cone, n_side, pixel_deg, *, chunk=1_000_000):
    """Pixel averages of a radial function on a square TAN grid centred on its centre.

    Parameters
    ----------
    func : callable, theta [deg] (array) -> value per steradian; called only at angles of at
        least 0.45 pixel (the cusp at the centre is never sampled)
    central_cone : float, the exact integral of ``func`` over the cone of half-angle
        arctan(tan(pixel / 2)), the circle inscribed in the central pixel
    n_side : int, odd
    pixel_deg : float

    Returns
    -------
    (values, solid_angles): arrays (n_side, n_side); values * solid_angles is each pixel's
    integral of ``func``.

    Notes
    -----
    Pixels within :data:`INNER_PIXELS` of the centre (in both axes) use 12 x 12 Gauss-Legendre
    nodes, the others 4 x 4, weighted by the TAN Jacobian; the central pixel is the inscribed cone
    plus its corners (:func:`_centre_corners`, 32 nodes). For func ~ 1/theta the relative error
    per pixel is < 1e-10 against scipy dblquad (the nearest singularity lies half a pixel outside
    each pixel, so Gauss-Legendre converges geometrically).
    The grid is symmetric, so one quadrant is computed and mirrored.
    """
    m = n_side // 2
    h = 0.5 * pixel_deg * DEG * 1.0  # half a pixel in tangent-plane units (radians at the centre)
    q_out, q_in = 4, 12
    quad = np.empty((m + 1, m + 1))
    offs = np.arange(m + 1)
    rows = max(1, chunk // (q_out * q_out * (m + 1)))
    for k in range(0, m + 1, rows):
        quad[k : k + rows] = _block_average(func, offs[k : k + rows], offs, h, q_out)
    k_in = min(INNER_PIXELS, m) + 1
    near = np.arange(k_in)
    quad[:k_in, :k_in] = _block_average(
        lambda th: func(np.maximum(th, 0.45 * pixel_deg)), near, near, h, q_in
    )
    quad[0, 0] = central_cone + _centre_corners(func, h)
    idx = np.abs(np.arange(n_side) - m)
    omega = tan_pixel_solid_angles(n_side, pixel_deg)
    return quad[idx[:, None], idx[None, :]] / omega, omega


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


# ----------------------------------------------------------------------------- templates


def _template_grid(half_width_deg, pixel_deg):
    """(n_side, angle grid [deg] for the profile, its midpoints)."""
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
    return n_side, np.exp(ln), np.exp(0.5 * (ln[1:] + ln[:-1]))


def _template(model, profiles, key, cone_key, grid, n_grid, n_side, pixel_deg):
    """(values, solid angles, interpolation error) of the draw-averaged profile ``key``."""
    mean = profiles[key].mean(axis=0)
    f_grid, f_mid = mean[:n_grid], mean[n_grid:]
    try:
        spline = _LogLogSpline(grid, f_grid)
    except ValueError:
        raise InputError(
            f"model '{model}': the mean {key} profile is not positive near the centre"
        ) from None
    mids = np.exp(0.5 * (np.log(grid[1:]) + np.log(grid[:-1])))
    ok = f_mid > 0
    interp_err = float(np.max(np.abs(spline(mids[ok]) / f_mid[ok] - 1.0)))
    central = float(profiles[cone_key][:, 0].mean())
    values, omega = pixel_average_radial(spline, central, n_side, pixel_deg)
    return values, omega, interp_err


def _fits_header(sat, wcs_centre, n_side, pixel_deg):
    from astropy.io import fits

    m = n_side // 2
    hdr = fits.Header()
    hdr["WCSAXES"] = 2
    hdr["CTYPE1"] = ("RA---TAN", "gnomonic projection")
    hdr["CTYPE2"] = ("DEC--TAN", "gnomonic projection")
    hdr["CRPIX1"] = (m + 1.0, "the satellite centre (pixel centre)")
    hdr["CRPIX2"] = (m + 1.0, "the satellite centre (pixel centre)")
    hdr["CRVAL1"] = (wcs_centre[0], "[deg] satellite RA")
    hdr["CRVAL2"] = (wcs_centre[1], "[deg] satellite Dec")
    hdr["CDELT1"] = (-pixel_deg, "[deg] pixel side (RA increases to the left)")
    hdr["CDELT2"] = (pixel_deg, "[deg] pixel side")
    hdr["CUNIT1"] = "deg"
    hdr["CUNIT2"] = "deg"
    hdr["RADESYS"] = "ICRS"
    hdr["OBJECT"] = sat.name
    return hdr


def _write_template(path, kind, values, omega, info, sat, n_side, pixel_deg, draw_table):
    from astropy.io import fits

    j = kind == "J"
    base = _fits_header(sat, (sat.ra_deg, sat.dec_deg), n_side, pixel_deg)
    hdr = base.copy()
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
    primary = fits.PrimaryHDU(data=values, header=hdr)
    sa_hdr = base.copy()
    sa_hdr["BUNIT"] = ("sr", "pixel solid angle")
    sa = fits.ImageHDU(data=omega, header=sa_hdr, name="SOLIDANG")
    draws = fits.BinTableHDU(draw_table, name="DRAWS")
    with atomic_path(path) as tmp:
        fits.HDUList([primary, sa, draws]).writeto(tmp, overwrite=True)


# ----------------------------------------------------------------------------- tables


def _label(a):
    return f"{a:g}"


def _angles(angles_deg):
    extra = [] if angles_deg is None else list(np.atleast_1d(np.asarray(angles_deg, dtype=float)))
    for a in extra:
        if not (math.isfinite(a) and 0.0 < a < 90.0):
            raise InputError(f"angles_deg: cone half-angles must be in (0, 90) deg, got {a:g}")
    by_label = {}
    for a in sorted(set(STANDARD_ANGLES) | set(float(x) for x in extra)):
        by_label.setdefault(_label(a), a)
    return list(by_label.values())


def _jd_table(rows, angles, summary, specs, satellite):
    import astropy.units as u
    from astropy.table import Table

    t = Table()
    t["model"] = [r["model"] for r in rows]
    t["angle_deg"] = np.array([r["angle"] for r in rows], float)
    t["angle_deg"].unit = u.deg
    t["angle_deg"].description = "cone half-angle"
    for kind, unit, lin in (("j", u.GeV**2 / u.cm**5, "j_mean"), ("d", u.GeV / u.cm**2, "d_mean")):
        for q in _Q:
            col = f"log10_{kind}_{q}"
            t[col] = np.array([r[f"log10_{kind}"][q] for r in rows], float)
            t[col].unit = u.dex(unit)
            t[col].description = f"{q} of log10 {kind.upper()} over the posterior draws"
        t[lin] = np.array([r[lin] for r in rows], float)
        t[lin].unit = unit
        t[lin].description = f"posterior mean of {kind.upper()} (linear)"
    t["n_draws"] = np.array([r["n"] for r in rows], int)
    t["n_draws"].description = "posterior draws with finite values"
    t.meta["satellite"] = satellite.name
    t.meta["ra_deg"] = satellite.ra_deg
    t.meta["dec_deg"] = satellite.dec_deg
    t.meta["catalogue_sha256"] = summary["catalogue"]["sha256"]
    t.meta["created"] = summary["created"]
    t.meta["version"] = summary["version"]
    t.meta["export_version"] = __version__
    t.meta["converged"] = {m: bool(summary["models"][m]["converged"]) for m in specs}
    t.meta["angles_deg"] = [float(a) for a in angles]
    t.meta["conventions"] = _CONVENTIONS
    return t


def _write_table(path, table):
    with atomic_path(path) as tmp:
        table.write(str(tmp), format="ascii.ecsv", overwrite=True)


def _refuse_existing(paths):
    for p in paths:
        if p.exists() or p.is_symlink():
            raise InputError(f"{p}: already exists; refusing to overwrite (choose a new folder)")


# ----------------------------------------------------------------------------- main entry


def export_run(
    run_dir,
    out_dir,
    angles_deg=None,
    *,
    n_template_draws=200,
    template_half_width_deg=None,
    pixel_deg=None,
    seed=0,
):
    """Export J/D tables, posterior draws and dJ/dOmega, dD/dOmega templates of a fit.

    Parameters
    ----------
    run_dir : path of a fit output folder (``summary.json`` and ``<model>/posterior.nc``)
    out_dir : folder to write into (created); no existing file is overwritten
    angles_deg : extra cone half-angles [deg] besides 0.1, 0.2 and 0.5
    n_template_draws : int, posterior draws averaged in the templates (all when fewer exist)
    template_half_width_deg : float, half-width of the templates [deg], at most 30; default
        max(1, largest export angle), capped at 30
    pixel_deg : float, pixel side [deg]; default 0.01 up to 2 deg half-width, else
        half-width / 200
    seed : int, seed of the random choice of template draws

    Returns
    -------
    list of the written paths: jd_factors.ecsv, per model <model>_draws.ecsv,
    <model>_dj_domega.fits, <model>_dd_domega.fits, then summary.json.

    Raises
    ------
    halo.core.errors.InputError
        bad run folder (one line naming the file and key), bad option, or an output file that
        already exists (checked before anything is written, and again before each write).

    Notes
    -----
    See the module docstring for the conventions and the accuracy of each numerical step.
    """
    angles = _angles(angles_deg)
    if isinstance(n_template_draws, bool) or int(n_template_draws) != n_template_draws:
        raise InputError(f"n_template_draws: must be a whole number, got {n_template_draws!r}")
    if n_template_draws < 1:
        raise InputError(f"n_template_draws: must be at least 1, got {n_template_draws}")
    if template_half_width_deg is None:
        half = min(MAX_HALF_WIDTH, max(1.0, max(angles)))
    else:
        half = template_half_width_deg
    if not (math.isfinite(half) and 0.0 < half <= MAX_HALF_WIDTH):
        raise InputError(
            f"template_half_width_deg: must be in (0, {MAX_HALF_WIDTH:g}] deg, got {half:g}"
        )
    if pixel_deg is None:
        pixel_deg = 0.01 if half <= 2.0 else half / 200.0
    if not (math.isfinite(pixel_deg) and 0.0 < pixel_deg <= half):
        raise InputError(f"pixel_deg: must be positive and at most the half-width, got {pixel_deg}")
    n_side, grid, mids = _template_grid(half, pixel_deg)

    run_dir, out_dir = Path(run_dir), Path(out_dir)
    summary, satellite, specs = read_run(run_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"{out_dir}: exists and is not a folder")
    names = list(specs)
    files = {"table": out_dir / "jd_factors.ecsv", "summary": out_dir / "summary.json"}
    for n in names:
        files[(n, "draws")] = out_dir / f"{n}_draws.ecsv"
        files[(n, "J")] = out_dir / f"{n}_dj_domega.fits"
        files[(n, "D")] = out_dir / f"{n}_dd_domega.fits"
    _refuse_existing(files.values())

    import astropy.units as u
    from astropy.table import Table

    rows, written = [], []
    pending = []  # (path, writer) so that nothing is written before every model succeeded
    half_edges = (n_side // 2 + 0.5) * pixel_deg
    for name in names:
        spec = specs[name]
        post = read_posterior(run_dir / name / "posterior.nc", _needed_sites(spec))
        n_chain, n_draw = post["distance"].shape
        chain, draw = np.meshgrid(np.arange(n_chain), np.arange(n_draw), indexing="ij")
        chain, draw = chain.ravel(), draw.ravel()
        values = parameter_values(spec, post)
        distance = post["distance"].ravel()
        r_e = post["r_e_kpc"].ravel()
        jd = _jd_draws(spec, satellite, values, distance, r_e, angles)

        draws_t = Table()
        draws_t["chain"] = chain
        draws_t["draw"] = draw
        draws_t["distance"] = distance
        draws_t["distance"].unit = u.kpc
        for i, a in enumerate(angles):
            for kind, unit in (("j", u.GeV**2 / u.cm**5), ("d", u.GeV / u.cm**2)):
                col = f"log10_{kind}_{_label(a)}"
                draws_t[col] = jd[f"log10_{kind}"][:, i]
                draws_t[col].unit = u.dex(unit)
                draws_t[col].description = f"log10 {kind.upper()} in a cone of {_label(a)} deg"
        draws_t.meta["model"] = name
        draws_t.meta["catalogue_sha256"] = summary["catalogue"]["sha256"]
        draws_t.meta["converged"] = bool(summary["models"][name]["converged"])
        draws_t.meta["conventions"] = _CONVENTIONS
        pending.append((files[(name, "draws")], lambda p, t=draws_t: _write_table(p, t)))

        for i, a in enumerate(angles):
            row = {"model": name, "angle": a}
            n_ok = 0
            for kind in ("j", "d"):
                x = jd[f"log10_{kind}"][:, i]
                ok = np.isfinite(x)
                n_ok = int(np.sum(ok)) if kind == "j" else min(n_ok, int(np.sum(ok)))
                qd = quantiles(x)
                row[f"log10_{kind}"] = {k: math.nan for k in _Q} if qd is None else qd
                row[f"{kind}_mean"] = float(np.mean(10.0 ** x[ok])) if ok.any() else math.nan
            row["n"] = n_ok
            rows.append(row)

        # templates: the same random subset of draws for J and D
        n_post = len(distance)
        rng = np.random.default_rng(seed)
        k = min(int(n_template_draws), n_post)
        pick = np.sort(rng.choice(n_post, size=k, replace=False))
        cone_in = math.atan(0.5 * pixel_deg * DEG) / DEG
        prof = _profile_draws(
            spec,
            satellite,
            {key: v[pick] for key, v in values.items()},
            distance[pick],
            r_e[pick],
            np.concatenate([grid, mids]),
            [cone_in, 0.5],
        )
        good = np.all(np.isfinite(prof["dj"]), axis=1) & np.all(np.isfinite(prof["j"]), axis=1)
        good &= np.all(np.isfinite(prof["dd"]), axis=1) & np.all(np.isfinite(prof["d"]), axis=1)
        if not good.any():
            raise InputError(
                f"{run_dir / name / 'posterior.nc'}: model '{name}': J is infinite or undefined "
                "for every template draw (too steep a cusp?)"
            )
        prof = {key: v[good] for key, v in prof.items()}
        pick = pick[good]
        draw_table = Table()
        draw_table["chain"] = chain[pick]
        draw_table["draw"] = draw[pick]
        draw_table["distance"] = distance[pick]
        draw_table["distance"].unit = u.kpc
        for kind, key, cone_key in (("J", "dj", "j"), ("D", "dd", "d")):
            vals, omega, ierr = _template(
                name, prof, key, cone_key, grid, len(grid), n_side, pixel_deg
            )
            info = {
                "model": name,
                "n_draws": int(len(pick)),
                "n_post": int(n_post),
                "seed": int(seed),
                "converged": bool(summary["models"][name]["converged"]),
                "sa_dev": float(np.max(np.abs(omega / omega[n_side // 2, n_side // 2] - 1.0))),
                "mean05": float(prof[cone_key][:, 1].mean()),
                "half_width": float(half_edges),
                "interp_err": ierr,
                "catalogue_sha256": summary["catalogue"]["sha256"],
                "run_version": summary["version"],
                "run_created": summary["created"],
            }
            pending.append(
                (
                    files[(name, kind)],
                    lambda p, a=(kind, vals, omega, info), dt=draw_table: _write_template(
                        p, *a, satellite, n_side, pixel_deg, dt
                    ),
                )
            )

    table = _jd_table(rows, angles, summary, specs, satellite)
    out_dir.mkdir(parents=True, exist_ok=True)
    order = [files["table"]] + [p for p, _ in pending] + [files["summary"]]
    writers = dict(pending)
    writers[files["table"]] = lambda p: _write_table(p, table)
    writers[files["summary"]] = lambda p: _copy_atomic(run_dir / "summary.json", p)
    for path in order:
        _refuse_existing([path])
        writers[path](path)
        written.append(path)
    return written


def _copy_atomic(src, dst):
    with atomic_path(dst) as tmp:
        shutil.copyfile(src, tmp)
