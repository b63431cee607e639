"""Compile once: wall time of sampling for a first catalogue and for a second, different one.

Run:  .venv/bin/python benchmarks/bench_compile_once.py [--chains 2 --warmup 100 --draws 100]

Mocks as in benchmarks/bench_fit.py (NFW, M200 = 1e9 Msun, c200 = 20, the demo satellite, errors
1-2 km/s, Gaussian method), fitted with the shipped `nfw` spec through the library calls of
`halo fit` (make_fit_data, make_model, run_nuts). A fresh persistent compilation cache in a
temporary folder; printed, with ratios against the first fit measured in the same run:

- the first fit (30 stars, cold: compiles);
- a second catalogue (35 stars, another seed) in the same process;
- a third catalogue (38 stars, another seed) in a new process (the persistent cache only).

With the catalogue an argument of the compiled program, padded to a bucket
(halo.inference.padding), 30, 35 and 38 stars all share the 64-star program.
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time


def fit(n, seed, args):
    """Wall time [s] of run_nuts on an n-star mock (compilation included)."""
    import halo  # noqa: F401
    from halo.inference.model import make_fit_data, make_model
    from halo.inference.sampling import run_nuts
    from halo.inputs.catalogue import stars_from_table
    from halo.inputs.satellite import read_satellite
    from halo.inputs.spec import load_spec
    from halo.mock.catalogue import make_mock
    from halo.physics.cosmology import rho_crit
    from halo.physics.dark import NFW
    from halo.pipeline.demo import demo_satellite_path

    sat, spec = read_satellite(demo_satellite_path()), load_spec("nfw")
    dark = NFW.from_m200_c200(1e9, 20.0, rho_c=rho_crit())
    mock = make_mock(
        sat, dark, n_stars=n, v_sys=50.0, error_range_kms=(1.0, 2.0), seed=seed, method="gaussian"
    )
    stars = stars_from_table(mock.table, sat, source=f"mock-{n}")
    data = make_fit_data(stars.v, stars.v_err, stars.radius_deg)
    t0 = time.perf_counter()
    run_nuts(
        make_model(spec, sat, data),
        chains=args.chains,
        warmup=args.warmup,
        draws=args.draws,
        seed=1,
        progress=False,
    )
    return time.perf_counter() - t0


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--chains", type=int, default=2)
    ap.add_argument("--warmup", type=int, default=100)
    ap.add_argument("--draws", type=int, default=100)
    ap.add_argument("--child", type=int, nargs=2, default=None, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child is not None:
        print(json.dumps({"t": fit(*args.child, args)}))
        return
    cache = tempfile.mkdtemp(prefix="halo-bench-compile-")
    env = dict(os.environ, JAX_COMPILATION_CACHE_DIR=cache)
    env["JAX_PERSISTENT_CACHE_MIN_COMPILE_TIME_SECS"] = "0"
    os.environ.update(env)
    first = fit(30, 30, args)
    same = fit(35, 35, args)
    cmd = [sys.executable, __file__, "--child", "38", "38"]
    cmd += ["--chains", str(args.chains), "--warmup", str(args.warmup), "--draws", str(args.draws)]
    out = subprocess.run(cmd, env=env, capture_output=True, text=True, check=True).stdout
    new = json.loads(out.strip().splitlines()[-1])["t"]
    print(f"sampling wall time, {args.chains} x ({args.warmup} + {args.draws}), nfw spec")
    for label, t in (
        ("first fit, 30 stars (compiles)", first),
        ("second catalogue, 35 stars, same process", same),
        ("third catalogue, 38 stars, new process", new),
    ):
        print(f"  {label:<44s} {t:7.1f} s  {t / first:5.2f}x")


if __name__ == "__main__":
    main()
