"""Cost of the binary and foreground terms: a 100-star fit with and without them.

Run:  .venv/bin/python benchmarks/bench_likelihood_cost.py [--chains 4 --warmup 1000 --draws 1000]

Mock: the demo satellite's size and distance, NFW halo (M200 = 1e9 Msun, c200 = 20), 100 stars
(Gaussian/Jeans velocities), errors 1-2 km/s, 40% binaries (orbits drawn one by one), a second
epoch a year later for a third of the stars, and 30 foreground stars. The shipped `nfw` spec is
fitted to the same catalogue four ways: plain (no binaries, no foreground: the reference), binaries
only, foreground only, both. Printed per variant: the one-off preparation (multi-epoch orbit
Monte Carlo), wall time of sampling including compilation, sampling alone (the identical run
repeated from JAX's persistent cache), leapfrog steps per iteration, time per gradient, and the
ratios to the plain fit measured in the same run.

Target (issue): binaries and foreground at most 2x the time of the plain fit.
"""

import argparse
import os
import tempfile
import time

os.environ["JAX_COMPILATION_CACHE_DIR"] = tempfile.mkdtemp(prefix="halo-bench-jax-")
os.environ["JAX_PERSISTENT_CACHE_MIN_COMPILE_TIME_SECS"] = "0"

import numpy as np

import halo  # noqa: F401
from halo.inference.likelihood import epoch_terms
from halo.inference.model import Foreground, make_fit_data, make_model
from halo.inference.sampling import run_nuts
from halo.inputs.catalogue import stars_from_table
from halo.inputs.satellite import read_satellite
from halo.inputs.spec import load_spec
from halo.mock.catalogue import make_mock
from halo.physics.binaries import load_mixture
from halo.physics.cosmology import rho_crit
from halo.physics.dark import NFW
from halo.pipeline.demo import demo_satellite_path


def run(model, kw):
    t0 = time.perf_counter()
    run_nuts(model, **kw)
    full = time.perf_counter() - t0
    t0 = time.perf_counter()
    mcmc = run_nuts(model, **kw)
    sample = time.perf_counter() - t0
    steps = float(np.mean(mcmc.get_extra_fields()["num_steps"]))
    return full, sample, steps


def cost_variants(n_stars=100):
    """The mock (n_stars members of the demo satellite, NFW halo) and the shipped `nfw` spec
    fitted four ways: (stars, orbit Monte Carlo time [s], {variant: model})."""
    sat = read_satellite(demo_satellite_path())
    spec = load_spec("nfw")
    dark = NFW.from_m200_c200(1e9, 20.0, rho_c=rho_crit())
    mock = make_mock(
        sat,
        dark,
        n_stars=n_stars,
        v_sys=50.0,
        error_range_kms=(1.0, 2.0),
        seed=7,
        method="gaussian",
        epochs_mjd=(60000.0, 60365.0),
        repeat_fraction=0.35,
        binary_fraction=0.4,
        n_foreground=30,
    )
    stars = stars_from_table(mock.table, sat, source="cost-mock")
    mix = load_mixture()
    t0 = time.perf_counter()
    ep = epoch_terms(stars, mix)
    t_prep = time.perf_counter() - t0
    plain = make_fit_data(stars.v, stars.v_err, stars.radius_deg)
    with_ep = make_fit_data(stars.v, stars.v_err, stars.radius_deg, epochs=ep)
    variants = {
        "plain": make_model(spec, sat, plain),
        "binaries": make_model(spec, sat, with_ep, binaries=mix),
        "foreground": make_model(spec, sat, plain, foreground=Foreground()),
        "both": make_model(spec, sat, with_ep, binaries=mix, foreground=Foreground()),
    }
    return stars, t_prep, variants


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--chains", type=int, default=4)
    ap.add_argument("--warmup", type=int, default=1000)
    ap.add_argument("--draws", type=int, default=1000)
    args = ap.parse_args()
    kw = dict(chains=args.chains, warmup=args.warmup, draws=args.draws, seed=1, progress=False)
    stars, t_prep, variants = cost_variants()
    print(
        f"{stars.n_stars} stars ({int(np.sum(stars.n_epochs > 1))} with two epochs); "
        f"{args.chains} chains x ({args.warmup} + {args.draws}); orbit Monte Carlo for the "
        f"epochs: {t_prep:.2f} s (once per fit)"
    )
    ref = None
    print(
        f"{'variant':>11} {'wall s':>8} {'sample s':>9} {'steps/it':>9} {'ms/grad':>8} "
        f"{'wall/plain':>11} {'sample/plain':>13}"
    )
    for name, model in variants.items():
        full, sample, steps = run(model, kw)
        per_grad = 1e3 * sample / (steps * args.chains * (args.warmup + args.draws))
        if ref is None:
            ref = (full, sample)
        if name in ("binaries", "both"):
            full += t_prep
        print(
            f"{name:>11} {full:8.1f} {sample:9.1f} {steps:9.1f} {per_grad:8.3f} "
            f"{full / ref[0]:11.2f} {sample / ref[1]:13.2f}",
            flush=True,
        )


if __name__ == "__main__":
    main()
