"""Sampler settings against effective samples per gradient: target acceptance and warmup length.

Run:  .venv/bin/python benchmarks/bench_sampler_settings.py --spec cored [--stars 100]
          [--settings 0.95:1000,0.8:1000,0.95:500] [--seeds 1,2]

The mock and likelihood of benchmarks/bench_likelihood_cost.py (binaries with a second epoch for
35% of the stars, foreground mixture on), the shipped spec named by --spec, 4 chains x (warmup +
1000 draws) per setting TARGET_ACCEPT:WARMUP, dense mass matrix (the product default). Printed per
run: leapfrog steps per kept draw, divergences, the smallest bulk ESS over the latent sites, the
largest r-hat and the smallest bulk ESS per 1000 leapfrog steps of the kept draws (gradients:
machine-independent, unlike seconds), plus the CPU time. The product default is 0.95:1000; a
setting is worth taking only if its ESS per gradient is higher AND its smallest ESS is not lower.
"""

import argparse
import sys
import time
from pathlib import Path

import jax
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
jax.config.update("jax_enable_x64", True)


def _model(spec_name, n_stars):
    from bench_likelihood_cost import cost_variants

    from halo.inference.model import Foreground, make_fit_data, make_model
    from halo.inputs.satellite import read_satellite
    from halo.inputs.spec import load_spec
    from halo.pipeline.demo import demo_satellite_path

    stars, _, _ = cost_variants(n_stars)
    from halo.inference.likelihood import epoch_terms
    from halo.physics.binaries import load_mixture

    mix = load_mixture()
    data = make_fit_data(stars.v, stars.v_err, stars.radius_deg, epochs=epoch_terms(stars, mix))
    sat = read_satellite(demo_satellite_path())
    return make_model(load_spec(spec_name), sat, data, binaries=mix, foreground=Foreground())


def _ess_rhat(samples, names):
    import arviz as az
    import xarray as xr

    post = xr.Dataset({k: (("chain", "draw"), np.asarray(samples[k])) for k in names})
    ess, rhat = az.ess(post, method="bulk"), az.rhat(post)
    return (
        min(float(ess[k].values.min()) for k in names),
        max(float(rhat[k].values.max()) for k in names),
    )


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--spec", default="nfw")
    ap.add_argument("--stars", type=int, default=100)
    ap.add_argument("--settings", default="0.95:1000,0.8:1000,0.95:500")
    ap.add_argument("--seeds", default="1,2")
    a = ap.parse_args()
    from halo.core.cache import configure_caches
    from halo.inference.sampling import run_nuts
    from halo.pipeline.model_run import latent_sites

    configure_caches()
    model = _model(a.spec, a.stars)
    names = latent_sites(model)
    print(f"{a.spec}, {a.stars} members + 30 field stars, 4 chains x (warmup + 1000)")
    for item in a.settings.split(","):
        ta, warmup = float(item.split(":")[0]), int(item.split(":")[1])
        for seed in (int(s) for s in a.seeds.split(",")):
            c0 = time.process_time()
            m = run_nuts(model, chains=4, warmup=warmup, draws=1000, seed=seed, progress=False,
                         target_accept=ta)  # fmt: skip
            cpu = time.process_time() - c0
            extra = m.get_extra_fields(group_by_chain=True)
            steps = np.asarray(extra["num_steps"])
            ess, rhat = _ess_rhat(m.get_samples(group_by_chain=True), names)
            print(
                f"target {ta:.2f} warmup {warmup:4d} seed {seed}: steps/draw {steps.mean():5.1f} "
                f"divergences {int(np.asarray(extra['diverging']).sum())} min ESS {ess:5.0f} "
                f"r-hat {rhat:.4f} ESS/1000 steps {1e3 * ess / steps.sum():5.1f} cpu {cpu:5.1f} s",
                flush=True,
            )


if __name__ == "__main__":
    main()
