"""What one gradient costs: the model's log density and its gradient, per term and per star count.

Run:  .venv/bin/python benchmarks/bench_gradient.py [--repeat 300]

The mock of benchmarks/bench_likelihood_cost.py (the demo satellite's size and distance, NFW halo
M200 = 1e9 Msun, c200 = 20, errors 1-2 km/s, 40% binaries, a second epoch for 35% of the stars, 30
foreground stars), at 100 and 1000 stars, fitted with the shipped `nfw` spec. For each variant
(plain: no binaries, no foreground; binaries; foreground; both) the potential energy's value and
gradient are compiled once (jax.jit of numpyro's potential function at the chains' start) and
evaluated ``--repeat`` times; printed: process CPU time per gradient [ms] (robust to other work on
the machine, unlike wall time) and its ratio to the plain 100-star gradient measured in the same
run. The difference between 100 and 1000 stars separates the per-star work (likelihood,
interpolation to the stars, mixtures) from the fixed work per gradient (Jeans solve on the radius
nodes, priors).
"""

import argparse
import time

import jax

import halo  # noqa: F401

jax.config.update("jax_enable_x64", True)


def _variants(n_stars):
    from bench_likelihood_cost import cost_variants

    return cost_variants(n_stars)[2]


def cpu_per_gradient(model, repeat):
    """Process CPU time [ms] of one value-and-gradient of the model's potential energy."""
    from numpyro.infer.util import initialize_model

    from halo.inference.sampling import start_strategy

    args = getattr(model, "compile_args", ())
    info = initialize_model(
        jax.random.PRNGKey(0), model, init_strategy=start_strategy(model), model_args=args
    )
    z = info.param_info.z
    grad = jax.jit(jax.value_and_grad(info.potential_fn))
    jax.block_until_ready(grad(z))
    t0 = time.process_time()
    for _ in range(repeat):
        jax.block_until_ready(grad(z))
    return 1e3 * (time.process_time() - t0) / repeat


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=300)
    args = ap.parse_args()
    ref = None
    print(f"{'stars':>6} {'variant':>11} {'cpu ms/grad':>12} {'/plain 100':>11}")
    for n in (100, 1000):
        for name, model in _variants(n).items():
            ms = cpu_per_gradient(model, args.repeat)
            ref = ref or ms
            print(f"{n:6d} {name:>11} {ms:12.3f} {ms / ref:11.2f}", flush=True)


if __name__ == "__main__":
    main()
