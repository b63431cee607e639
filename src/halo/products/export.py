"""Export a fit's J- and D-factors: tables for joint-likelihood analyses and spatial templates.

``export_run(RUN, OUT)`` reads a fit output folder (``RUN/summary.json`` and
``RUN/<model>/posterior.nc``, written by :func:`halo.pipeline.fit.fit`) and writes into OUT::

    OUT/jd_factors.ecsv          one row per (model, cone): converged and preferred flags,
                                 quantiles, mean and std of log10 J and log10 D, their 95% upper
                                 bound and the linear posterior means of J and D; the cones are
                                 0.1, 0.2, 0.5 deg, the extra angles and 2rh (2 R_e / d per draw,
                                 as summary.json's "2rh"); see halo.products.jd_tables
    OUT/<model>_draws.ecsv       per posterior draw: chain, draw, distance, log10 J and log10 D
    OUT/<model>_dj_domega.fits   dJ/dOmega template on a TAN grid centred on the satellite (ICRS
                                 or Galactic WCS)
    OUT/<model>_dd_domega.fits   dD/dOmega template, same grid
    OUT/summary.json             a byte copy of the run's summary

Models without a dark halo (``stars-only``) are skipped. Every draw uses its own distance, so the
distance uncertainty is propagated through the posterior. Haloes are cut where the fit cut them:
at each draw's Jacobi radius, read from ``<model>/posterior.nc``'s ``derived`` group
(``r_jacobi_pc``), when summary.json's ``models.<m>.jd_truncation`` says so (the default), else
untruncated (:mod:`halo.products.jd_truncation`); tables carry the untruncated values beside the
reported ones, and every table and FITS header states which.

Conventions: J(theta) = Int_cone dOmega Int_los rho^2 dl and
D(theta) = Int_cone dOmega Int_los rho dl in a cone of half-angle theta (solid angle
2 pi (1 - cos theta)), computed exactly (no small-angle or cylinder approximation) by
:mod:`halo.physics.jfactor`. Units: J in GeV^2 cm^-5, D in GeV cm^-2;
templates in GeV^2 cm^-5 sr^-1 and GeV cm^-2 sr^-1.

Templates: a pixel's value is dJ/dOmega averaged over the pixel (the pixel's J divided by its solid
angle), so sum_ij value_ij Omega_ij is J over the map. The pixel solid angles Omega_ij of the
gnomonic (TAN) grid are exact (closed form) and stored in the ``SOLIDANG`` extension; header card
PIXSA holds the central pixel's solid angle and SADEV the largest relative deviation of any pixel's
solid angle from PIXSA, i.e. the error of the shortcut sum(pixels) * PIXSA. The ``NORM``
extension is the map divided by JINT (DINT) [sr^-1], the shape alone (sum NORM_ij Omega_ij = 1).
The ``DRAWS`` extension lists the posterior draws averaged. JWHOLE is the mean J of the whole
halo (inside its truncation radius: the cone arcsin(r_t / d), 80 deg for untruncated haloes) and
JFRAC = JINT / JWHOLE the fraction the map holds; by default each model's map is the smallest
half-width whose inscribed cone holds 99% of JWHOLE (:mod:`halo.products.template_extent`).

The work is done by one module per job: :mod:`halo.products.rundir` reads the run folder,
:mod:`halo.products.jd_draws` evaluates J, D and their profiles per draw,
:mod:`halo.products.jd_tables` builds the tables, :mod:`halo.products.tan_pixels` the pixel
solid angles and averages, and :mod:`halo.products.templates` the FITS templates.

Accuracy of each numerical step
-------------------------------
1. log10 J and log10 D per draw: :func:`halo.physics.jfactor.log10_j` / ``log10_d`` (exact
   cone); relative error of J and D < 1e-12 for NFW and Burkert haloes, < 3e-7 for Einasto and
   Zhao haloes.
2. Table summaries: :func:`halo.core.quantiles.quantiles` (numpy percentiles with linear
   interpolation) over the finite draws; their uncertainty is the posterior's Monte Carlo error,
   not reduced here. The linear means are means of 10**log10 over the same draws (float64
   rounding only).
3. dJ/dOmega and dD/dOmega per template draw: :func:`halo.physics.jfactor.dj_domega` /
   ``dd_domega``, relative error < 1e-10 (0.0001-60 deg), on a logarithmic grid of angles
   (:data:`halo.products.templates.GRID_PER_EFOLD` nodes per e-fold) from 0.45 pixel to beyond
   the map's corner; the template is the mean over ``n_template_draws`` posterior draws
   (seeded), whose Monte Carlo error is std(J) / sqrt(n_template_draws) in J.
4. Interpolation of the draw-averaged profile: cubic spline in (ln theta, ln dJ/dOmega); its error
   is measured at every grid midpoint against the direct mean and stored in header card INTERPER
   (3e-9 for dJ/dOmega, 1.4e-9 for dD/dOmega of the NFW test haloes, untruncated). Where
   truncated haloes' edges lie in the map (the default: each draw cut at its own r_J, so the mean
   profile falls to zero over the spread of arcsin(r_J / d)) the largest relative error sits in
   that faint tail and can reach 1 (a midpoint the spline puts beyond the last positive node);
   card INTERPJ weights the error by each radius's share of J (D), |spline - mean| theta^2 summed
   over the midpoints against mean theta^2: what the map as a whole carries.
5. Pixel averages (the cusp): for the central pixel, the exact cone J of its inscribed circle
   (step 1 accuracy) plus the four corners by 32-node Gauss-Legendre quadrature in polar
   coordinates (r = h cosh t removes the square-root kink); pixels within
   :data:`halo.products.tan_pixels.INNER_PIXELS` of the centre by 12 x 12 Gauss-Legendre nodes,
   the rest by 4 x 4 nodes, each node weighted by the TAN Jacobian (1 + xi^2 + eta^2)^(-3/2).
   For a 1/theta cusp (NFW J) the relative error per pixel is < 1e-10 (measured against scipy
   dblquad; the tests require 1e-9, and 1e-6 for the exported template's central pixels,
   interpolation included).
6. Pixel solid angles: exact closed form for a gnomonic rectangle (rounding < 1e-11 relative).
7. Summing pixels whose centres lie within a cone approximates the cone by whole pixels: the
   error depends on pixel size; with 0.01 deg pixels, for the NFW test haloes of
   tests/export_setup.py, below 3e-4 (J) and 1e-3 (D) at 0.2 and 0.5 deg, 3e-3 (J) and 8e-3 (D)
   at 0.1 deg (measured 2.0e-4 / 7.8e-4 at 0.5 deg, 2.6e-3 / 6.8e-3 at 0.1 deg; asserted at
   these levels by tests/test_export_templates.py).
   This is a property of the pixel grid, not of the template values.
"""

import shutil
from pathlib import Path

import numpy as np

from halo.core.errors import InputError
from halo.core.fileio import atomic_path, write_ecsv
from halo.products.jd_draws import jd_draws, needed_sites
from halo.products.jd_tables import draws_table, export_angles, jd_rows, jd_table
from halo.products.jd_truncation import cut_radii_kpc
from halo.products.rundir import SUMMARY_NAME, posterior_path, read_posterior, read_run
from halo.products.template_extent import (
    MAX_HALF_WIDTH,
    TemplateOptions,
    check_options,
    default_pixel,
    template_grid,
)
from halo.products.templates import template_writers
from halo.results.derived import parameter_values

__all__ = ["export_run", "MAX_HALF_WIDTH"]


def _output_files(out_dir, names):
    """{key: path} of every file an export writes."""
    files = {"table": out_dir / "jd_factors.ecsv", "summary": out_dir / SUMMARY_NAME}
    for n in names:
        files[(n, "draws")] = out_dir / f"{n}_draws.ecsv"
        files[(n, "J")] = out_dir / f"{n}_dj_domega.fits"
        files[(n, "D")] = out_dir / f"{n}_dd_domega.fits"
    return files


def _refuse_existing(paths):
    for p in paths:
        if p.exists() or p.is_symlink():
            raise InputError(f"{p}: already exists; refusing to overwrite (choose a new folder)")


def _model_draws(run_dir, spec, name, summary):
    """{"chain", "draw", "distance", "r_e", "values", "r_cut", "truncation"} of every posterior
    draw of a model: ``r_cut`` [kpc] the fit's Jacobi radius per draw when it truncated J and D
    (inf otherwise), ``truncation`` its summary.json ``jd_truncation`` entry."""
    path = posterior_path(run_dir, name)
    post = read_posterior(path, needed_sites(spec))
    n_chain, n_draw = post["distance"].shape
    chain, draw = np.meshgrid(np.arange(n_chain), np.arange(n_draw), indexing="ij")
    r_cut, entry = cut_radii_kpc(summary, name, path, n_chain * n_draw)
    return {
        "chain": chain.ravel(),
        "draw": draw.ravel(),
        "values": parameter_values(spec, post),
        "distance": post["distance"].ravel(),
        "r_e": post["r_e_kpc"].ravel(),
        "r_cut": r_cut,
        "truncation": entry,
    }


def _export_model(run_dir, name, spec, satellite, summary, angles, opts):
    """(table rows, {kind: writer}) of one model: its draws table and its two templates."""
    draws = _model_draws(run_dir, spec, name, summary)
    jd = jd_draws(
        spec, satellite, draws["values"], draws["distance"], draws["r_e"], angles,
        r_cut=draws["r_cut"],
    )  # fmt: skip
    table = draws_table(name, draws, jd, summary)
    writers = {"draws": lambda p, t=table: write_ecsv(p, t)}
    where = posterior_path(run_dir, name)
    floor = min(MAX_HALF_WIDTH, max(1.0, max(angles)))
    for kind, writer in template_writers(name, spec, satellite, summary, draws, opts, floor, where):
        writers[kind] = writer
    return jd_rows(name, jd), writers


def export_run(
    run_dir,
    out_dir,
    angles_deg=None,
    *,
    n_template_draws=200,
    template_half_width_deg=None,
    pixel_deg=None,
    seed=0,
    frame="icrs",
):
    """Export J/D tables, posterior draws and dJ/dOmega, dD/dOmega templates of a fit.

    Parameters
    ----------
    run_dir : path of a fit output folder (``summary.json`` and ``<model>/posterior.nc``)
    out_dir : folder to write into (created); no existing file is overwritten
    angles_deg : extra cone half-angles [deg] besides 0.1, 0.2 and 0.5
    n_template_draws : int, posterior draws averaged in the templates (all when fewer exist)
    template_half_width_deg : float, half-width of the templates [deg], at most 30; default:
        per model, the smallest of :data:`halo.products.template_extent.HALF_WIDTHS`, at least
        max(1, largest export angle), whose inscribed cone holds 99% of the mean J of the whole
        halo (30 when none does); the header card JFRAC says how much the map holds
    pixel_deg : float, pixel side [deg]; default 0.01 up to 2 deg half-width, else
        half-width / 200
    seed : int, seed of the random choice of template draws
    frame : "icrs" or "galactic", the celestial frame of the templates' WCS

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
    angles = export_angles(angles_deg)
    opts = check_options(
        TemplateOptions(n_template_draws, seed, template_half_width_deg, pixel_deg, frame)
    )
    if opts.half_width_deg is not None:  # a grid too large is refused before any work
        template_grid(opts.half_width_deg, opts.pixel_deg or default_pixel(opts.half_width_deg))

    run_dir, out_dir = Path(run_dir), Path(out_dir)
    summary, satellite, specs = read_run(run_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"{out_dir}: exists and is not a folder")
    files = _output_files(out_dir, specs)
    _refuse_existing(files.values())

    # nothing is written before every model succeeded
    rows, writers = [], {}
    for name, spec in specs.items():
        model_rows, model_writers = _export_model(
            run_dir, name, spec, satellite, summary, angles, opts
        )
        rows += model_rows
        for kind, writer in model_writers.items():
            writers[files[(name, kind)]] = writer
    table = jd_table(rows, summary, list(specs), satellite)
    writers[files["table"]] = lambda p: write_ecsv(p, table)
    writers[files["summary"]] = lambda p: _copy_atomic(run_dir / SUMMARY_NAME, p)
    out_dir.mkdir(parents=True, exist_ok=True)
    models = [p for key, p in files.items() if key not in ("table", "summary")]
    order = [files["table"], *models, files["summary"]]
    written = []
    for path in order:
        _refuse_existing([path])
        writers[path](path)
        written.append(path)
    return written


def _copy_atomic(src, dst):
    with atomic_path(dst) as tmp:
        shutil.copyfile(src, tmp)
