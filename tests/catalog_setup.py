"""Shared set-up of the catalogue tests: a test satellite and a small table of stars with
epochs, written in any of the formats the reader takes."""

import numpy as np
from astropy.table import Table

from halo.inputs.satellite import parse_satellite

SAT = parse_satellite(
    {
        "name": "Test",
        "ra_deg": 150.0,
        "dec_deg": 20.0,
        "distance_kpc": 50.0,
        "r_half_pc": 100.0,  # 0.1146 deg at 50 kpc
        "ellipticity": 0.3,
        "position_angle_deg": 30.0,
        "stellar_mass_msun": 1e4,
    }
)

FORMATS = {
    ".ecsv": "ascii.ecsv",
    ".fits": "fits",
    ".FITS": "fits",
    ".fits.gz": "fits",
    ".vot": "votable",
    ".xml": "votable",
    ".csv": "ascii.csv",
    ".txt": "ascii.csv",
}


def base_table(n_stars=12, units=True):
    """n_stars stars within ~0.05 deg of the centre; S00 has 3 epochs and S01 2, interleaved."""
    rng = np.random.default_rng(1)
    ids = [f"S{i:02d}" for i in range(n_stars)]
    ids = ids[:2] + ["S00"] + ids[2:5] + ["S01", "S00"] + ids[5:]
    n = len(ids)
    pos = {s: (150.0 + rng.uniform(-0.05, 0.05), 20.0 + rng.uniform(-0.05, 0.05)) for s in ids}
    t = Table()
    t["id"] = ids
    t["ra"] = [pos[s][0] for s in ids]
    t["dec"] = [pos[s][1] for s in ids]
    t["vlos"] = np.round(rng.normal(60.0, 5.0, n), 3)
    t["vlos_err"] = np.round(rng.uniform(0.5, 3.0, n), 3)
    t["mjd"] = 57000.0 + np.round(rng.uniform(0, 900, n), 4)
    t["member_prob"] = np.round(rng.uniform(0.5, 1.0, n), 3)
    if units:
        for c, unit in [("ra", "deg"), ("dec", "deg"), ("vlos", "km/s"), ("vlos_err", "km/s")]:
            t[c].unit = unit
        t["mjd"].unit = "d"
    return t


def write(table, path):
    fmt = next(f for ext, f in FORMATS.items() if str(path).endswith(ext))
    table.write(path, format=fmt, overwrite=True)
    return path
