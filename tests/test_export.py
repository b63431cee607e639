"""halo.products.export: J/D tables, posterior draws and dJ/dOmega templates from a fit output folder.

The run folder is built here by hand (summary.json and an arviz posterior.nc with a few NFW draws),
without running the sampler.
"""

import json
import math
import shutil

import arviz as az
import astropy.units as u
import jax
import jax.numpy as jnp
import numpy as np
import pytest
from astropy.coordinates import SkyCoord
from astropy.io import fits
from astropy.table import Table
from astropy.wcs import WCS
from scipy import integrate

from halo.core.constants import DEG, MSUN2_KPC5_TO_GEV2_CM5, MSUN_KPC2_TO_GEV_CM2
from halo.core.errors import InputError
from halo.physics.cosmology import rho_crit
from halo.physics.dark import NFW
from halo.physics.jfactor import d_factor, dj_domega, j_factor, log10_j
from halo.products.export import export_run
from halo.products.rundir import read_posterior, read_run
from halo.products.tan_pixels import pixel_average_radial, tan_pixel_solid_angles

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


def _posterior(seed=1):
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


def _summary():
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


def _make_run(root, post=None, summary=None):
    post = _posterior() if post is None else post
    (root / "nfw").mkdir(parents=True)
    az.from_dict({"posterior": post}).to_netcdf(str(root / "nfw" / "posterior.nc"))
    (root / "summary.json").write_text(json.dumps(summary or _summary(), indent=1))
    return root


@pytest.fixture(scope="module")
def exported(tmp_path_factory):
    base = tmp_path_factory.mktemp("export")
    post = _posterior()
    run = _make_run(base / "run", post)
    out = base / "out"
    paths = export_run(run, out, [1.0], n_template_draws=N_TEMPLATE, seed=3)
    return {"run": run, "out": out, "paths": paths, "post": post}


def _per_draw(fn, post, chains, draws):
    """fn(nfw, distance) for the given draws, the NFW halo built here from (m200, c200)."""
    rho_c = rho_crit()

    def one(m200, c200, dist):
        return fn(NFW.from_m200_c200(m200, c200, rho_c=rho_c), dist)

    args = (post[k][chains, draws] for k in ("m200", "c200", "distance"))
    return jax.vmap(one)(*args)


def _template(out, kind):
    with fits.open(out / f"nfw_{kind}_domega.fits") as hdul:
        return (
            np.array(hdul[0].data),
            np.array(hdul["SOLIDANG"].data),
            hdul[0].header.copy(),
            np.array(hdul["DRAWS"].data["chain"]),
            np.array(hdul["DRAWS"].data["draw"]),
        )


def _separation_deg(header):
    data_shape = (header["NAXIS2"], header["NAXIS1"])
    yy, xx = np.mgrid[: data_shape[0], : data_shape[1]]
    sky = WCS(header).pixel_to_world(xx, yy)
    return sky.separation(SkyCoord(SAT["ra_deg"] * u.deg, SAT["dec_deg"] * u.deg)).deg


# ----------------------------------------------------------------------------- outputs


def test_written_files(exported):
    out = exported["out"]
    names = [p.name for p in exported["paths"]]
    assert names == [
        "jd_factors.ecsv",
        "nfw_draws.ecsv",
        "nfw_dj_domega.fits",
        "nfw_dd_domega.fits",
        "summary.json",
    ]
    assert all(p.parent == out for p in exported["paths"])
    assert sorted(p.name for p in out.iterdir()) == sorted(names)  # no stars-only, no *.part
    assert (out / "summary.json").read_bytes() == (exported["run"] / "summary.json").read_bytes()


def test_posterior_read_back(exported):
    got = read_posterior(exported["run"] / "nfw" / "posterior.nc", ["m200", "distance"])
    for k in ("m200", "distance"):
        np.testing.assert_array_equal(got[k], exported["post"][k])


# ----------------------------------------------------------------------------- (a) templates


@pytest.mark.parametrize(
    ("kind", "factor", "conv"),
    [
        ("dj", j_factor, MSUN2_KPC5_TO_GEV2_CM5),
        ("dd", d_factor, MSUN_KPC2_TO_GEV_CM2),
    ],
)
def test_template_cone_sums_match_exact_cone(exported, kind, factor, conv):
    data, omega, hdr, chains, draws = _template(exported["out"], kind)
    assert hdr["NDRAWS"] == len(chains) == N_TEMPLATE
    assert hdr["BUNIT"] == ("GeV2 cm-5 sr-1" if kind == "dj" else "GeV cm-2 sr-1")
    sep = _separation_deg(hdr)
    angles = jnp.array([0.1, 0.2, 0.5])
    per_draw = _per_draw(lambda p, d: factor(p, d, angles), exported["post"], chains, draws)
    mean = np.asarray(per_draw).mean(axis=0) * conv
    for i, theta in enumerate((0.1, 0.2, 0.5)):
        # the validation: pixels within the cone times their solid angle reproduce the
        # mean exact-cone value (halo.physics.jfactor, checked against scipy in tests/test_jfactor.py)
        # within 1%; the residual is the pixelisation of the cone's edge
        inside = sep <= theta
        assert np.sum(data[inside] * omega[inside]) == pytest.approx(mean[i], rel=1e-2)
    key = "J" if kind == "dj" else "D"
    total = np.sum(data * omega)
    assert total == pytest.approx(hdr[f"{key}INT"], rel=1e-12)
    assert np.sum(data) * hdr["PIXSA"] == pytest.approx(total, rel=hdr["SADEV"])
    assert hdr[f"{key}MEAN05"] == pytest.approx(mean[2], rel=1e-10)
    # the map (half-width 1.005 deg) holds more than the 0.5 deg cone
    assert total > mean[2]


def test_template_central_pixels_against_scipy(exported):
    """Cusp handling: the central pixel and its neighbour against scipy's adaptive quadrature of
    the draw-averaged dJ/dOmega (halo.physics.jfactor.dj_domega, evaluated directly, no interpolation)."""
    data, omega, hdr, chains, draws = _template(exported["out"], "dj")
    post = exported["post"]
    mean_f = jax.jit(
        lambda th: jnp.mean(_per_draw(lambda p, d: dj_domega(p, d, th), post, chains, draws))
    )

    def f(rho):  # dJ/dOmega at tangent-plane radius rho, times the TAN Jacobian
        return float(mean_f(math.atan(rho) / DEG)) * MSUN2_KPC5_TO_GEV2_CM5 / (1 + rho * rho) ** 1.5

    h = 0.5 * abs(hdr["CDELT1"]) * DEG
    m = data.shape[0] // 2
    # central pixel in polar coordinates (8 symmetric triangles),
    # dOmega = rho drho dphi / (1 + rho^2)^1.5
    centre = (
        8.0
        * integrate.dblquad(
            lambda rho, phi: f(rho) * rho,
            0.0,
            math.pi / 4,
            0.0,
            lambda phi: h / math.cos(phi),
            epsabs=0.0,
            epsrel=1e-9,
        )[0]
    )
    neighbour = integrate.dblquad(
        lambda y, x: f(math.hypot(x, y)), h, 3 * h, -h, h, epsabs=0.0, epsrel=1e-9
    )[0]
    assert data[m, m] * omega[m, m] == pytest.approx(centre, rel=1e-6)
    assert data[m, m + 1] * omega[m, m + 1] == pytest.approx(neighbour, rel=1e-6)
    # bounds (common practice): the square lies between its inscribed and circumscribed cones
    p = abs(hdr["CDELT1"])

    def mean_j(th):
        per = _per_draw(lambda q, d: j_factor(q, d, th), post, chains, draws)
        return np.mean(np.asarray(per)) * MSUN2_KPC5_TO_GEV2_CM5

    j_in = mean_j(math.atan(0.5 * p * DEG) / DEG)
    j_out = mean_j(math.atan(math.sqrt(0.5) * p * DEG) / DEG)
    assert j_in < data[m, m] * omega[m, m] < j_out
    assert hdr["INTERPER"] < 1e-6


def test_pixel_average_of_a_cusp_against_scipy():
    """1/theta (the NFW J cusp) on a 9 x 9 grid: pixel integrals against scipy dblquad."""
    p, n = 0.02, 9
    h = 0.5 * p * DEG
    a = math.atan(h)
    cone = integrate.quad(lambda t: 2 * math.pi * math.sin(t) / t, 0, a, epsabs=0, epsrel=1e-13)[0]
    values, omega = pixel_average_radial(lambda th: 1.0 / (np.asarray(th) * DEG), cone, n, p)
    m = n // 2

    def g(y, x):
        return 1.0 / math.atan(math.hypot(x, y)) / (1 + x * x + y * y) ** 1.5

    centre = (
        8
        * integrate.dblquad(
            lambda r, phi: r / math.atan(r) / (1 + r * r) ** 1.5,
            0,
            math.pi / 4,
            0,
            lambda phi: h / math.cos(phi),
            epsabs=0,
            epsrel=1e-12,
        )[0]
    )
    assert values[m, m] * omega[m, m] == pytest.approx(centre, rel=1e-9)
    for i, j in [(1, 0), (1, 1), (2, 1), (0, 4), (4, 4)]:
        x0, y0 = (2 * i - 1) * h, (2 * j - 1) * h
        ref = integrate.dblquad(g, x0, x0 + 2 * h, y0, y0 + 2 * h, epsabs=0, epsrel=1e-12)[0]
        assert values[m + j, m + i] * omega[m + j, m + i] == pytest.approx(ref, rel=1e-9)
    # symmetric grid
    np.testing.assert_allclose(values, values[::-1, ::-1], rtol=1e-14)
    np.testing.assert_allclose(values, values.T, rtol=1e-14)


def test_tan_pixel_solid_angles():
    # a cube face seen from the cube's centre is a gnomonic square of half-side 1 and subtends
    # 4 pi / 6 (common practice: six faces by symmetry)
    n = 101
    omega = tan_pixel_solid_angles(n, 2.0 / n / DEG)
    assert np.sum(omega) == pytest.approx(4 * math.pi / 6, rel=1e-13)
    # single pixels against scipy dblquad of the TAN Jacobian (Calabretta & Greisen 2002, A&A 395,
    # 1077: tangent-plane coordinates tan(theta) (cos phi, sin phi), dOmega = dA / (1 + rho^2)^1.5)
    p = 0.5
    omega = tan_pixel_solid_angles(21, p)
    h = 0.5 * p * DEG
    for i, j in [(0, 0), (10, 10), (7, -3)]:
        ref = integrate.dblquad(
            lambda y, x: (1 + x * x + y * y) ** -1.5,
            (2 * i - 1) * h,
            (2 * i + 1) * h,
            (2 * j - 1) * h,
            (2 * j + 1) * h,
            epsabs=0,
            epsrel=1e-13,
        )[0]
        assert omega[10 + j, 10 + i] == pytest.approx(ref, rel=1e-11)


# ----------------------------------------------------------------------------- (b) WCS


def test_template_wcs(exported):
    data, _, hdr, _, _ = _template(exported["out"], "dj")
    w = WCS(hdr)
    assert data.shape == (201, 201)  # default: half-width max(1, 1) deg, 0.01 deg pixels
    assert hdr["CTYPE1"] == "RA---TAN" and hdr["CTYPE2"] == "DEC--TAN"
    centre = w.pixel_to_world(hdr["CRPIX1"] - 1, hdr["CRPIX2"] - 1)  # FITS is 1-based
    assert centre.ra.deg == pytest.approx(SAT["ra_deg"], abs=1e-10)
    assert centre.dec.deg == pytest.approx(SAT["dec_deg"], abs=1e-10)
    assert np.argmax(data) == np.ravel_multi_index((100, 100), data.shape)
    p = hdr["CDELT2"]
    sat = SkyCoord(SAT["ra_deg"] * u.deg, SAT["dec_deg"] * u.deg)
    for dx, dy in [(3, 4), (-60, 25), (100, 100)]:
        sky = w.pixel_to_world(hdr["CRPIX1"] - 1 + dx, hdr["CRPIX2"] - 1 + dy)
        # TAN: a pixel at tangent-plane radius R [deg] lies arctan(R pi / 180) from the centre
        # (Calabretta & Greisen 2002, A&A 395, 1077, eq. 54)
        expected = math.atan(math.hypot(dx, dy) * p * DEG) / DEG
        assert sky.separation(sat).deg == pytest.approx(expected, rel=1e-9)
    east = w.pixel_to_world(hdr["CRPIX1"] - 1 - 10, hdr["CRPIX2"] - 1)
    assert sat.position_angle(east).deg == pytest.approx(90.0, abs=1e-6)  # east is left


# ----------------------------------------------------------------------------- (c) tables


def test_table_quantiles_match_draws(exported):
    out = exported["out"]
    table = Table.read(out / "jd_factors.ecsv", format="ascii.ecsv")
    draws = Table.read(out / "nfw_draws.ecsv", format="ascii.ecsv")
    assert list(table["angle_deg"]) == [0.1, 0.2, 0.5, 1.0]
    assert set(table["model"]) == {"nfw"}
    assert table.meta["catalogue_sha256"] == SHA
    assert table.meta["converged"] == {"nfw": True}
    assert "exact cone" in table.meta["conventions"]
    assert table["j_mean"].unit == u.GeV**2 / u.cm**5
    assert table["log10_d_median"].unit == u.dex(u.GeV / u.cm**2)
    assert len(draws) == CHAINS * DRAWS
    np.testing.assert_array_equal(draws["distance"], exported["post"]["distance"].ravel())
    for row in table:
        a = f"{row['angle_deg']:g}"
        for kind in ("j", "d"):
            x = np.asarray(draws[f"log10_{kind}_{a}"])
            pct = np.percentile(x, [50, 16, 84, 2.5, 97.5])
            for q, v in zip(("median", "p16", "p84", "p2.5", "p97.5"), pct, strict=True):
                assert row[f"log10_{kind}_{q}"] == pytest.approx(v, rel=1e-14)
            assert row[f"log10_{kind}_mean"] == pytest.approx(np.mean(x), rel=1e-14)
            assert row[f"log10_{kind}_std"] == pytest.approx(np.std(x), rel=1e-12)
            assert row[f"{kind}_mean"] == pytest.approx(np.mean(10.0**x), rel=1e-12)
        assert row["n_draws"] == CHAINS * DRAWS
    # one draw recomputed from its own (m200, c200, distance)
    k = 27
    c, d = int(draws["chain"][k]), int(draws["draw"][k])
    assert (c, d) == divmod(k, DRAWS)
    post = exported["post"]
    nfw = NFW.from_m200_c200(post["m200"][c, d], post["c200"][c, d], rho_c=rho_crit())
    for a in (0.1, 0.5, 1.0):
        ref = float(log10_j(nfw, post["distance"][c, d], a))
        assert draws[f"log10_j_{a:g}"][k] == pytest.approx(ref, abs=1e-12)


# ----------------------------------------------------------------------------- (d) refusals


def test_refuses_to_overwrite(exported, tmp_path):
    out = exported["out"]
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    with pytest.raises(InputError, match="already exists"):
        export_run(exported["run"], out)
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    fresh = tmp_path / "fresh"
    fresh.mkdir()
    (fresh / "nfw_dd_domega.fits").write_text("mine")
    with pytest.raises(InputError, match="nfw_dd_domega.fits"):
        export_run(exported["run"], fresh)
    assert [p.name for p in fresh.iterdir()] == ["nfw_dd_domega.fits"]
    assert (fresh / "nfw_dd_domega.fits").read_text() == "mine"


def _break_summary(run, fn):
    s = _summary()
    fn(s)
    (run / "summary.json").write_text(json.dumps(s))


@pytest.mark.parametrize(
    ("damage", "where"),
    [
        ("no folder", "run"),
        ("no summary", "summary.json"),
        ("garbled summary", "summary.json"),
        ("no models key", "summary.json"),
        ("bad satellite", "summary.json"),
        ("no posterior", "posterior.nc"),
        ("garbled posterior", "posterior.nc"),
        ("posterior without c200", "posterior.nc"),
    ],
)
def test_bad_run_folder(tmp_path, damage, where):
    run = tmp_path / "run"
    post = _posterior()
    if damage == "posterior without c200":
        post.pop("c200")
    if damage != "no folder":
        _make_run(run, post)
    if damage == "no summary":
        (run / "summary.json").unlink()
    elif damage == "garbled summary":
        (run / "summary.json").write_text('{"version": "0.1.0", "models": {')
    elif damage == "no models key":
        _break_summary(run, lambda s: s.pop("models"))
    elif damage == "bad satellite":
        _break_summary(run, lambda s: s["satellite"].pop("ra_deg"))
    elif damage == "no posterior":
        shutil.rmtree(run / "nfw")
    elif damage == "garbled posterior":
        (run / "nfw" / "posterior.nc").write_bytes(b"\x89HDF\r\n\x1a\n not really")
    with pytest.raises(InputError) as info:
        export_run(run, tmp_path / "out")
    msg = str(info.value)
    assert "\n" not in msg and where in msg
    assert not (tmp_path / "out").exists()


def test_bad_options(exported, tmp_path):
    run = exported["run"]
    for kwargs, text in [
        ({"angles_deg": [0.0]}, "angles_deg"),
        ({"angles_deg": [95.0]}, "angles_deg"),
        ({"n_template_draws": 0}, "n_template_draws"),
        ({"template_half_width_deg": 5.0, "pixel_deg": 0.001}, "pixels per side"),
    ]:
        with pytest.raises(InputError, match=text):
            export_run(run, tmp_path / "out", **kwargs)
    assert not (tmp_path / "out").exists()


def test_user_spec_file_is_used(tmp_path):
    """A model fitted from a user TOML spec is rebuilt from that file (its spec_source)."""
    spec = tmp_path / "mine.toml"
    spec.write_text(
        'dark_profile = "burkert"\nanisotropy = "constant"\n'
        '[parameters.rho_s]\nprior = "log-uniform"\nlow = 1e6\nhigh = 1e10\n'
        '[parameters.r_s]\nprior = "log-uniform"\nlow = 0.01\nhigh = 10\n'
        '[parameters.beta]\nprior = "uniform"\nlow = -1\nhigh = 0.9\n'
    )
    s = _summary()
    s["models"]["mine"] = {"converged": False, "spec_source": str(spec)}
    run = _make_run(tmp_path / "run", summary=s)
    _, sat, specs = read_run(run)
    assert sat.name == SAT["name"]
    assert set(specs) == {"nfw", "mine"}
    assert specs["mine"].dark_profile == "burkert"
