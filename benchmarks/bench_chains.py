"""Chains on every core: sampling wall time with the chains on one thread against one group of
chains per core (halo.inference.sampling.chain_threads), in the same run.

Run:  .venv/bin/python benchmarks/bench_chains.py [--stars 100 --chains 4 --warmup 500 --draws 500]

A mock as in benchmarks/bench_fit.py (NFW, M200 = 1e9 Msun, c200 = 20, the demo satellite, errors
1-2 km/s), fitted with the shipped `nfw` spec through the library calls of `halo fit`
(make_fit_data, make_model, run_nuts). Each setting is compiled first (a short run), then timed;
printed: wall time, process CPU time, and the ratio of wall times. The draws of the two settings
are compared too (every chain keeps its key and start, so they must be identical). On a machine
busy with other work the ratio says little: read the CPU time beside it.
"""

import argparse
import os
import time


def _model(n_stars):
    import halo  # noqa: F401
    from halo.inference.model import make_fit_data, make_model
    from halo.inputs.catalogue import stars_from_table
    from halo.inputs.satellite import read_satellite
    from halo.inputs.spec import load_spec
    from halo.mock.catalogue import make_mock
    from halo.physics.cosmology import rho_crit
    from halo.physics.dark import NFW
    from halo.pipeline.demo import demo_satellite_path

    sat = read_satellite(demo_satellite_path())
    dark = NFW.from_m200_c200(1e9, 20.0, rho_c=rho_crit())
    mock = make_mock(sat, dark, n_stars=n_stars, error_range_kms=(1.0, 2.0), seed=3)
    stars = stars_from_table(mock.table, sat, source="mock")
    data = make_fit_data(stars.v, stars.v_err, stars.radius_deg)
    return make_model(load_spec("nfw"), sat, data)


def _timed(model, threads, args):
    import numpy as np

    from halo.inference.sampling import run_nuts

    os.environ["HALO_CHAIN_THREADS"] = str(threads)
    run_nuts(model, chains=args.chains, warmup=10, draws=10, progress=False)
    t0, c0 = time.perf_counter(), os.times()
    mcmc = run_nuts(model, chains=args.chains, warmup=args.warmup, draws=args.draws, progress=False)
    c1 = os.times()
    wall = time.perf_counter() - t0
    cpu = (c1.user + c1.system) - (c0.user + c0.system)
    draws = {k: np.asarray(v) for k, v in mcmc.get_samples(group_by_chain=True).items()}
    return wall, cpu, draws


def main():
    import jax
    import numpy as np

    jax.config.update("jax_enable_x64", True)
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--stars", type=int, default=100)
    p.add_argument("--chains", type=int, default=4)
    p.add_argument("--warmup", type=int, default=500)
    p.add_argument("--draws", type=int, default=500)
    args = p.parse_args()
    from halo.inference.sampling import chain_threads

    os.environ.pop("HALO_CHAIN_THREADS", None)
    cores = chain_threads(args.chains)
    model = _model(args.stars)
    one = _timed(model, 1, args)
    many = _timed(model, cores, args)
    same = all(np.array_equal(one[2][k], many[2][k]) for k in one[2])
    print(f"{args.stars} stars, {args.chains} chains x ({args.warmup} + {args.draws})")
    print(f"1 thread:        wall {one[0]:7.1f} s  cpu {one[1]:7.1f} s  ratio 1.00")
    print(
        f"{cores} threads:       wall {many[0]:7.1f} s  cpu {many[1]:7.1f} s  "
        f"ratio {many[0] / one[0]:.2f}"
    )
    print(f"identical draws: {same}")


if __name__ == "__main__":
    main()
