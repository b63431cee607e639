"""The embedded demo: a fictional satellite and its mock catalogue, shipped as package data.

The satellite "Synthetica I" and its stars are invented: the catalogue was drawn by halo's own
mock generator from an equilibrium distribution function (Eddington inversion) with the truth in
:data:`DEMO_TRUTH` (also stored in the catalogue's metadata): members with 40% binaries, a
second epoch for about a third of the stars, field (foreground) stars mixed in, and [Fe/H]
measurements with a known mean and intrinsic spread (fictional too). Regenerate
it with

    python -m halo.pipeline.demo --regenerate

which rewrites ``src/halo/data/demo_catalogue.ecsv`` deterministically from the seed below.
"""

import sys
from importlib import resources
from pathlib import Path

__all__ = [
    "demo_satellite_path",
    "demo_catalogue_path",
    "DEMO_TRUTH",
    "generate_demo_catalogue",
    "run_demo",
]

#: the halo, anisotropy and sampling behind the demo catalogue
DEMO_TRUTH = {
    "dark_profile": "core-nfw",
    "m200_msun": 1.5e9,
    "c200": 18.0,
    "r_c_kpc": 0.06,
    "n": 1.0,
    "beta": 0.0,
    "v_sys_kms": 87.3,
    "n_stars": 120,
    "error_range_kms": (1.0, 2.5),
    "seed": 20261202,
    # a realistic campaign: 40% binaries (orbits drawn one by one), a second epoch a year later
    # for about a third of the stars, and Galactic field stars in the spectroscopic sample
    "epochs_mjd": (60310.0, 60675.0),
    "repeat_fraction": 0.35,
    "binary_fraction": 0.4,
    "n_foreground": 25,
    # [Fe/H] per epoch (0.1-0.3 dex errors) for 90% of the stars, from a stream of its own (the
    # kinematics are those drawn without it); the field's from the mock's broad default
    "metallicity": {"mean": -2.3, "spread": 0.35, "error_range": (0.1, 0.3), "fraction": 0.9},
}

#: the demo's models; its sampler settings are the defaults of ``halo fit`` except a shorter
#: warmup (500: the demo's chains converge with ESS > 1000 per parameter, measured)
DEMO_MODELS = ("nfw", "cored", "stars-only")
DEMO_WARMUP = 500


def demo_satellite_path():
    """Path of the embedded demo satellite file (TOML)."""
    return str(resources.files("halo").joinpath("data/demo_satellite.toml"))


def demo_catalogue_path():
    """Path of the embedded demo catalogue (ECSV)."""
    return str(resources.files("halo").joinpath("data/demo_catalogue.ecsv"))


def _demo_mock():
    from halo.inputs.satellite import read_satellite
    from halo.mock.catalogue import make_mock
    from halo.mock.metallicity import MockMetallicity
    from halo.physics.anisotropy import Constant
    from halo.physics.cosmology import rho_crit
    from halo.physics.dark import CoreNFW

    t = DEMO_TRUTH
    sat = read_satellite(demo_satellite_path())
    dark = CoreNFW.from_m200_c200(
        t["m200_msun"], t["c200"], rho_c=rho_crit(), r_c=t["r_c_kpc"], n=t["n"]
    )
    return make_mock(
        sat,
        dark,
        anisotropy=Constant(t["beta"]),
        n_stars=t["n_stars"],
        v_sys=t["v_sys_kms"],
        error_range_kms=t["error_range_kms"],
        seed=t["seed"],
        method="df",
        epochs_mjd=t["epochs_mjd"],
        repeat_fraction=t["repeat_fraction"],
        binary_fraction=t["binary_fraction"],
        n_foreground=t["n_foreground"],
        metallicity=MockMetallicity(**t["metallicity"]),
    )


def generate_demo_catalogue(path=None):
    """Draw the demo catalogue and write it (ECSV, truth in the metadata); returns the path."""
    from halo.core.fileio import write_ecsv

    mock = _demo_mock()
    path = Path(path or Path(__file__).parents[1] / "data" / "demo_catalogue.ecsv")
    mock.table.meta["description"] = (
        "Mock catalogue of the fictional satellite Synthetica I, drawn by halo's mock generator "
        "(python -m halo.pipeline.demo --regenerate). Not real data."
    )
    write_ecsv(path, mock.table)
    return path


def run_demo(out_dir, progress=True):
    """Fit the demo catalogue with the default models; returns the text to print."""
    from halo.inputs.catalogue import read_catalogue
    from halo.inputs.satellite import read_satellite
    from halo.pipeline.fit import FitSettings, fit
    from halo.products.text_report import format_summary

    sat = read_satellite(demo_satellite_path())
    stars = read_catalogue(demo_catalogue_path(), sat)
    summary = fit(
        stars,
        sat,
        out_dir,
        DEMO_MODELS,
        FitSettings(warmup=DEMO_WARMUP, progress=progress),
        satellite_path=demo_satellite_path(),
    )
    t = stars_truth_line()
    return format_summary(summary, out_dir) + "\n\n" + t


def stars_truth_line():
    """One line with the demo's truth, to set beside the recovered values."""
    from astropy.table import Table

    truth = Table.read(demo_catalogue_path(), format="ascii.ecsv").meta["truth"]
    return (
        f"demo truth: core-NFW halo M200 = {DEMO_TRUTH['m200_msun']:.3g} Msun, c200 = "
        f"{DEMO_TRUTH['c200']:g}, r_c = {DEMO_TRUTH['r_c_kpc'] * 1e3:g} pc, isotropic; "
        f"M(<r_1/2) = {truth['m_half_msun']:.3g} Msun at r_1/2 = "
        f"{truth['r_half_3d_kpc'] * 1e3:.1f} pc; {truth['n_stars']} members of which "
        f"{truth['n_binaries']} binaries, {truth.get('n_foreground', 0)} foreground stars"
    )


if __name__ == "__main__":  # pragma: no cover - maintenance command
    if "--regenerate" in sys.argv:
        print(generate_demo_catalogue())
    else:
        print(__doc__)
