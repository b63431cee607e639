"""Shared set-up of the export tests: a run folder built by hand (summary.json and an arviz
posterior.nc with a few NFW draws, without running the sampler), its export, and readers of the
exported templates."""

import json

import arviz as az
import astropy.units as u
import jax
import numpy as np
from astropy.coordinates import SkyCoord
from astropy.io import fits
from astropy.wcs import WCS

from halo.physics.cosmology import rho_crit
from halo.physics.dark import NFW
from halo.products.export import export_run

SAT = {
    "name": "Test dwarf",
    "ra_deg": 150.0,
    "dec_deg": 30.0,
    "distance_kpc": 60.0,
    "distance_err_kpc": 3.0,
    "r_half_pc": 40.0,
    "stellar_mass_msun": 1.0e4,
}
CHAINS, DRAWS = 2, 20
N_TEMPLATE = 25
SHA = "0123456789abcdef" * 4


def nfw_posterior(seed=1):
    """NFW posterior draws as numpyro would name the sites (log10_m200 sampled, m200 derived)."""
    rng = np.random.default_rng(seed)
    shape = (CHAINS, DRAWS)
    lm = rng.uniform(8.3, 9.3, shape)
    return {
        "log10_m200": lm,
        "m200": 10.0**lm,
        "c200": rng.uniform(15.0, 25.0, shape),
        "beta": rng.uniform(-0.5, 0.5, shape),
        "distance": rng.normal(60.0, 3.0, shape),
        "r_e_kpc": rng.uniform(0.035, 0.045, shape),
        "m_star": rng.normal(1.0e4, 1.0e3, shape),
        "v_sys": rng.normal(0.0, 1.0, shape),
    }


def run_summary():
    entry = {"converged": True, "parameters": {}, "derived": {}}
    return {
        "version": "0.1.0",
        "created": "2026-01-01T00:00:00+00:00",
        "satellite": dict(SAT),
        "catalogue": {"sha256": SHA, "n_rows": 50, "n_stars": 50, "source": "stars.ecsv"},
        "settings": {"chains": CHAINS, "draws": DRAWS},
        "models": {
            "nfw": {**entry, "spec_source": "models/nfw.toml"},
            "stars-only": {**entry, "spec_source": "models/stars-only.toml"},
        },
    }


def make_run(root, post=None, summary=None):
    post = nfw_posterior() if post is None else post
    (root / "nfw").mkdir(parents=True)
    az.from_dict({"posterior": post}).to_netcdf(str(root / "nfw" / "posterior.nc"))
    (root / "summary.json").write_text(json.dumps(summary or run_summary(), indent=1))
    return root


_CACHE = {}


def exported_run(tmp_path_factory):
    """The hand-built run folder and its export (made on the first call of the session)."""
    if "exported" not in _CACHE:
        _CACHE["exported"] = _export(tmp_path_factory)
    return _CACHE["exported"]


def _export(tmp_path_factory):
    base = tmp_path_factory.mktemp("export")
    post = nfw_posterior()
    run = make_run(base / "run", post)
    out = base / "out"
    # a 1 deg half-width with 0.01 deg pixels (the cone-sum tolerances of
    # tests/test_export_templates.py are stated for these pixels); the default extent is tested
    # in tests/test_fits_options.py
    paths = export_run(
        run, out, [1.0], n_template_draws=N_TEMPLATE, seed=3, template_half_width_deg=1.0
    )
    return {"run": run, "out": out, "paths": paths, "post": post}


def values_per_draw(fn, post, chains, draws):
    """fn(nfw, distance) for the given draws, the NFW halo built here from (m200, c200)."""
    rho_c = rho_crit()

    def one(m200, c200, dist):
        return fn(NFW.from_m200_c200(m200, c200, rho_c=rho_c), dist)

    args = (post[k][chains, draws] for k in ("m200", "c200", "distance"))
    return jax.vmap(one)(*args)


def read_template(out, kind):
    with fits.open(out / f"nfw_{kind}_domega.fits") as hdul:
        return (
            np.array(hdul[0].data),
            np.array(hdul["SOLIDANG"].data),
            hdul[0].header.copy(),
            np.array(hdul["DRAWS"].data["chain"]),
            np.array(hdul["DRAWS"].data["draw"]),
        )


def separation_deg(header):
    data_shape = (header["NAXIS2"], header["NAXIS1"])
    yy, xx = np.mgrid[: data_shape[0], : data_shape[1]]
    sky = WCS(header).pixel_to_world(xx, yy)
    return sky.separation(SkyCoord(SAT["ra_deg"] * u.deg, SAT["dec_deg"] * u.deg)).deg
