"""The binary fraction fitted by `halo fit` on two-epoch mocks with a known binary fraction.

Each realisation: N stars of a stars-only Plummer cluster (intrinsic dispersion from the stars'
own mass, ~0.3 km/s), a fraction F of them binaries drawn orbit by orbit from the default
population (halo.physics.binaries.sample_orbits), observed twice 365 days apart with errors
0.3-0.6 km/s. The catalogue is written as ECSV and fitted through the command line exactly as a
user runs it (`python -m halo.cli fit ... --model stars-only`, binaries on, foreground off), and
the binary fraction's posterior median and 95% interval are read from summary.json. Prints each
realisation, the mean bias and the 95% coverage.

    python benchmarks/calibrate_binary_fraction_fit.py [REALISATIONS] [N_STARS] [FRACTION]
"""

import json
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
from astropy.table import Table

from halo.physics.binaries import BinaryPopulation, los_velocity, sample_orbits

SATELLITE = """name = "calibration cluster"
ra_deg = 10.0
dec_deg = 0.0
distance_kpc = 30.0
distance_err_kpc = 1.0
r_half_pc = 20.0
r_half_err_pc = 2.0
stellar_mass_msun = 5000.0
stellar_mass_err_msun = 1000.0
"""


def _catalogue(seed, n, fraction):
    rng = np.random.default_rng(seed)
    orb = sample_orbits(BinaryPopulation(), n, rng)
    is_binary = rng.uniform(size=n) < fraction
    t = np.array([0.0, 365.0])
    b = los_velocity(orb, t[:, None]) * is_binary
    err = rng.uniform(0.3, 0.6, (2, n))
    # Plummer radii (projected: R = a sqrt(u / (1 - u)), common practice) with a = r_half
    u = rng.uniform(0.0, 0.95, n)
    r_deg = np.degrees(0.020 * np.sqrt(u / (1 - u)) / 30.0)
    phi = rng.uniform(0, 2 * np.pi, n)
    v = 30.0 + rng.normal(0, 0.3, n) + b + err * rng.standard_normal((2, n))
    table = Table(
        {
            "id": np.tile(np.arange(n), 2),
            "ra": 10.0 + np.tile(r_deg * np.cos(phi), 2),
            "dec": np.tile(r_deg * np.sin(phi), 2),
            "vlos": v.ravel(),
            "vlos_err": err.ravel(),
            "mjd": 60000.0 + np.repeat(t, n),
        }
    )
    return table, is_binary.mean()


def _fit(folder, seed):
    cmd = [sys.executable, "-m", "halo.cli", "fit", str(folder / "cat.ecsv")]
    cmd += [str(folder / "sat.toml"), "--out", str(folder / "out"), "--model", "stars-only"]
    cmd += ["--chains", "2", "--warmup", "400", "--draws", "400", "--seed", str(seed)]
    cmd += ["--no-foreground", "--quiet"]
    subprocess.run(cmd, check=True, cwd=folder)
    summary = json.loads((folder / "out" / "summary.json").read_text())
    return summary["models"]["stars-only"]["binary_fraction"]


def main(n_real=4, n=100, fraction=0.5):
    rows = []
    for seed in range(n_real):
        with tempfile.TemporaryDirectory() as tmp:
            folder = Path(tmp)
            table, realised = _catalogue(seed, n, fraction)
            table.write(folder / "cat.ecsv", format="ascii.ecsv")
            (folder / "sat.toml").write_text(SATELLITE)
            q = _fit(folder, seed)
        rows.append((realised, q["p2.5"], q["median"], q["p97.5"]))
        interval = f"[{q['p2.5']:.3f}, {q['p97.5']:.3f}]"
        print(f"realised {realised:.3f}  fitted {q['median']:.3f} {interval}", flush=True)
    m = np.array(rows)
    cover = np.mean((m[:, 1] < m[:, 0]) & (m[:, 0] < m[:, 3]))
    print(
        f"{n_real} realisations of {n} stars, true fraction {fraction}: mean (median - realised) "
        f"= {np.mean(m[:, 2] - m[:, 0]):+.3f}, 95% coverage = {cover:.2f}"
    )


if __name__ == "__main__":
    args = sys.argv[1:]
    main(*(int(a) for a in args[:2]), *(float(a) for a in args[2:3]))
