"""Chains in lockstep: the chains of a group vectorised (``jax.vmap``, every leapfrog step of every
chain in one array operation, each iteration as long as its longest tree) against one after the
other (``lax.map``, the product's way), with one group per core or all chains in one group; in the
same run, with the same mock, model and seeds.

Run:  .venv/bin/python benchmarks/bench_chain_vmap.py [--stars 100 --spec nfw --draws 500]

At 100 stars a gradient costs a fixed ~0.2 ms (benchmarks/bench_gradient.py) that barely grows with
the array size, so several chains in one operation may cost little more than one; the price is the
lockstep (an iteration lasts as long as the chain with the most leapfrog steps). Printed per
setting: sampling wall time, process CPU time, leapfrog steps per draw, min bulk ESS, ESS per
second and the ratio of wall times to the product's setting. The draws differ between the lockstep
and the sequential settings only by rounding (the same keys and starts).
"""

import argparse
import os
import time


def _model(n_stars, spec):
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
    return make_model(load_spec(spec), sat, data)


def _vmapped_chain_map(fn):
    """As halo.inference.sampling._compiled_chain_map, with ``jax.vmap`` over a group of chains in
    place of lax.map over one chain: one group per thread (HALO_CHAIN_THREADS)."""
    import jax

    bound = dict(fn.keywords)
    args, kwargs = bound.pop("args"), bound.pop("kwargs")

    def chains(map_args, args, kwargs):
        return jax.vmap(lambda m: fn.func(m, args=args, kwargs=kwargs, **bound))(map_args)

    compiled = jax.jit(chains)
    return lambda map_args: _lockstep_groups(compiled, (args, kwargs), map_args)


def _lockstep_groups(jitted, extra, map_args):
    """The chains split into chain_threads(n) groups, each group in lockstep on its own thread."""
    import concurrent.futures

    import jax
    import jax.numpy as jnp
    import numpy as np

    from halo.inference.sampling import chain_threads

    n = jax.tree.leaves(map_args)[0].shape[0]
    k = chain_threads(n)
    edges = np.linspace(0, n, k + 1).round().astype(int)
    groups = [jax.tree.map(lambda a, i=i: a[edges[i] : edges[i + 1]], map_args) for i in range(k)]
    exe = {}
    for g in groups:  # traced on this thread (numpyro's handler stack is process-wide)
        size = jax.tree.leaves(g)[0].shape[0]
        exe.setdefault(size, jitted.lower(g, *extra).compile())

    def one(g):
        return jax.block_until_ready(exe[jax.tree.leaves(g)[0].shape[0]](g, *extra))

    with concurrent.futures.ThreadPoolExecutor(max_workers=k) as pool:
        outs = list(pool.map(one, groups))
    return jax.tree.map(lambda *xs: jnp.concatenate(xs, axis=0), *outs)


def _timed(model, threads, lockstep, args):
    import arviz as az
    import numpy as np

    from halo.inference import sampling

    product = sampling._compiled_chain_map
    os.environ["HALO_CHAIN_THREADS"] = str(threads)
    if lockstep:
        sampling._compiled_chain_map = _vmapped_chain_map
    try:
        run = dict(chains=args.chains, warmup=args.warmup, draws=args.draws, progress=False)
        sampling.run_nuts(model, **run)  # compiles (the loop lengths are part of the program)
        t0, c0 = time.perf_counter(), os.times()
        mcmc = sampling.run_nuts(model, **run)
        c1 = os.times()
    finally:
        sampling._compiled_chain_map = product
    wall = time.perf_counter() - t0
    cpu = (c1.user + c1.system) - (c0.user + c0.system)
    post = {k: np.asarray(v) for k, v in mcmc.get_samples(group_by_chain=True).items()}
    steps = float(np.mean(np.asarray(mcmc.get_extra_fields()["num_steps"])))
    ess = az.ess(az.convert_to_dataset({k: v for k, v in post.items() if v.ndim == 2}))
    return wall, cpu, steps, float(min(ess[k].values for k in ess.data_vars))


def main():
    import jax

    jax.config.update("jax_enable_x64", True)
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--stars", type=int, default=100)
    p.add_argument("--spec", default="nfw")
    p.add_argument("--chains", type=int, default=4)
    p.add_argument("--warmup", type=int, default=500)
    p.add_argument("--draws", type=int, default=500)
    args = p.parse_args()
    model = _model(args.stars, args.spec)
    settings = [
        ("lax.map, 2 threads (product)", 2, False),
        ("vmap, 2 threads", 2, True),
        ("vmap, 1 thread", 1, True),
    ]
    print(f"{args.spec}, {args.stars} stars, {args.chains} chains x ({args.warmup} + {args.draws})")
    ref = None
    for label, threads, lockstep in settings:
        wall, cpu, steps, ess = _timed(model, threads, lockstep, args)
        ref = ref or wall
        print(
            f"{label:30s} wall {wall:6.1f} s  cpu {cpu:6.1f} s  steps/draw {steps:5.1f}  "
            f"min ESS {ess:6.0f}  ESS/s {ess / wall:6.1f}  ratio {wall / ref:.2f}",
            flush=True,
        )


if __name__ == "__main__":
    main()
