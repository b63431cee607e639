"""NUTS on CPU (numpyro) and convergence diagnostics (arviz).

The chains run inside compiled programs (``lax.map`` over one chain under ``jit``): one program
for every chain and any chain count, as many chains at a time as there are cores, each on its own
thread. On CPU this is several times faster than numpyro's Python-driven sequential method
(benchmarks/bench_fit.py, benchmarks/bench_chains.py); chains in lockstep (``vmap``) are slower
(benchmarks/bench_chain_vmap.py).
"""

import dataclasses
import functools
import sys

import numpy as np

__all__ = [
    "run_nuts",
    "Diagnostics",
    "diagnostics",
    "RHAT_MAX",
    "ESS_MIN",
]

RHAT_MAX = 1.01
ESS_MIN = 400.0
#: iterations per progress-bar update (host callbacks stall the compiled chains)
PROGRESS_STRIDE = 10


def chain_threads(n_chains):
    """How many chains run at once: ``HALO_CHAIN_THREADS`` if set (a batch worker that owns one
    core sets 1), else the cores this process may use, at most ``n_chains``."""
    import os

    env = os.environ.get("HALO_CHAIN_THREADS", "").strip()
    if env.isdigit() and int(env) > 0:
        cores = int(env)
    else:
        cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    return max(1, min(int(n_chains), cores or 1))


def _compiled_chain_map(fn):
    """Run the chains inside compiled programs (``lax.map`` over one chain under jit), each chain
    a call of the same program, :func:`chain_threads` of them at the same time on their own
    threads (XLA releases the GIL while a program runs), so that every core samples.

    On CPU one program per group is several times faster than numpyro's Python-driven sequential
    method, and needs no change of the XLA device count. ``fn`` is numpyro's per-chain function
    with the model arguments bound (a partial): they are passed to the compiled program as
    arguments, not baked into it as constants, so that catalogues padded to the same bucket
    share one program (in memory and in the persistent compilation cache). Every chain keeps
    its own key and start, so the draws do not depend on the number of groups.
    """
    import jax

    bound = dict(getattr(fn, "keywords", None) or {})
    if not {"args", "kwargs"} <= bound.keys():  # another numpyro layout: arguments as constants
        compiled = jax.jit(lambda map_args: jax.lax.map(fn, map_args))
        return lambda map_args: _each_chain(compiled, (), map_args)
    args, kwargs = bound.pop("args"), bound.pop("kwargs")

    def chains(map_args, args, kwargs):
        return jax.lax.map(lambda m: fn.func(m, args=args, kwargs=kwargs, **bound), map_args)

    compiled = jax.jit(chains)
    return lambda map_args: _each_chain(compiled, (args, kwargs), map_args)


def _each_chain(jitted, extra, map_args):
    """``jitted(chain, *extra)`` for every chain (leading axis of ``map_args``) as a group of one,
    on :func:`chain_threads` threads at a time, results joined back in chain order.

    Every chain runs the same program (a map over one chain): 1, 2 or 4 chains, one thread or
    several (a batch worker that owns one core), all load the one program from the persistent
    compilation cache instead of compiling one per group size. It is compiled here, on the calling
    thread, before any chain runs: numpyro's effect handlers live on one process-wide stack, so two
    threads must never trace a model at the same time. The threads only run the executable.
    """
    import concurrent.futures

    import jax
    import jax.numpy as jnp

    n = jax.tree.leaves(map_args)[0].shape[0]
    chains = [jax.tree.map(lambda a, i=i: a[i : i + 1], map_args) for i in range(n)]
    exe = jitted.lower(chains[0], *extra).compile()

    def one(chain):
        return jax.block_until_ready(exe(chain, *extra))

    k = chain_threads(n)
    if k == 1:
        outs = [one(c) for c in chains]
    else:
        with concurrent.futures.ThreadPoolExecutor(max_workers=k) as pool:
            outs = list(pool.map(one, chains))
    return jax.tree.map(lambda *xs: jnp.concatenate(xs, axis=0), *outs)


def _progress_kernel(model, total, enabled, **kw):
    """NUTS whose every iteration reports to a progress bar through a host callback."""
    import jax
    from numpyro.infer import NUTS

    if not enabled:
        return NUTS(model, **kw), None
    from tqdm.auto import tqdm

    bar = tqdm(total=total, desc="sampling", unit="it", mininterval=0.5, file=sys.stderr)

    def tick(_):
        bar.update(PROGRESS_STRIDE)

    class _NUTS(NUTS):
        def sample(self, state, model_args, model_kwargs):
            new = super().sample(state, model_args, model_kwargs)
            # a host callback at every iteration cost 15% of the demo's wall time (measured);
            # every PROGRESS_STRIDE iterations it costs nothing measurable
            jax.lax.cond(
                new.i % PROGRESS_STRIDE == 0,
                lambda i: jax.debug.callback(tick, i),
                lambda i: None,
                new.i,
            )
            return new

    return _NUTS(model, **kw), bar


def start_strategy(model):
    """How the chains start. Sites the model names in ``model.start_at_mean`` (``v_sys``: the
    mean of its prior, i.e. the velocity peak of the inner stars or the satellite file's value)
    start there in every chain. Sites on a bounded interval (uniform priors) start uniformly in
    (-1, 1) of their unconstrained space, the central ~46 per cent of the interval. Sites on an
    unbounded or half-bounded support (normal and truncated-normal priors from the satellite
    file: distance, half-light radius, stellar mass, magnitude) start at a random quantile in
    (0.25, 0.75) of their prior. The values are read from the site's distribution, whose
    parameters are arguments of the compiled program, so catalogues still share one program.

    v_sys started anywhere in its +-100 km/s prior let a chain begin among the field stars; with
    the foreground on it then took every star for a field star, where the gradient in v_sys
    vanishes, and stayed there (measured: r-hat 1.53, ln B off by about 100). A distance of
    60 +- 3 kpc (truncated at 6 kpc) started "uniformly in (-1, 1) unconstrained" means
    6 + e^u = 6.4 to 8.7 kpc, with the half-light radius and stellar mass at 0.4 to 2.7 pc and
    Msun: a chain of tests/test_fit.py's cored fit stayed there (distance 7.5 kpc, r-hat 2.2).
    """
    return functools.partial(_start_at, names=tuple(getattr(model, "start_at_mean", ())))


def _start_at(site=None, names=()):
    """numpyro init strategy (a partial, as numpyro expects); see :func:`start_strategy`."""
    import jax
    from numpyro.distributions import constraints
    from numpyro.infer import init_to_uniform

    if site is None:
        return functools.partial(_start_at, names=names)
    if site["type"] != "sample" or site["is_observed"] or site["value"] is not None:
        return init_to_uniform(site, radius=1.0)
    fn = site["fn"]
    if site["name"] in names:
        return fn.mean
    if isinstance(fn.support, constraints.interval) or fn.support.is_discrete:
        return init_to_uniform(site, radius=1.0)
    shape = site["kwargs"].get("sample_shape", ()) + fn.shape()
    q = jax.random.uniform(site["kwargs"]["rng_key"], shape, minval=0.25, maxval=0.75)
    try:
        return fn.icdf(q)
    except NotImplementedError:
        return init_to_uniform(site, radius=1.0)


def run_nuts(
    model,
    *,
    chains=4,
    warmup=1000,
    draws=1000,
    seed=0,
    progress=True,
    target_accept=0.95,
    max_tree_depth=8,
    dense_mass=True,
    init_params=None,
    inverse_mass_matrix=None,
    adapt_mass_matrix=True,
):
    """Run NUTS on ``model`` and return the numpyro MCMC object (samples, extra fields).

    The model runs with its ``compile_args`` (:func:`halo.inference.model.make_model`: the
    catalogue padded to its bucket) as arguments of the compiled program, when it has them.

    The mass matrix is dense by default (adapted during warmup): with a few thousand stars the
    posterior is narrow and correlated, and a diagonal matrix needed 2.6x more leapfrog steps
    per iteration (measured, benchmarks/bench_fit.py).

    ``init_params``: optional unconstrained starting points (dict of arrays with a leading chain
    axis), e.g. draws of an earlier posterior (warm start). Otherwise initial points are drawn
    uniformly in (-1, 1) of the unconstrained space, independently per chain from ``seed``; the
    run is reproducible run to run. With ``progress`` a bar on stderr
    counts the iterations of all chains (warmup and draws).

    ``inverse_mass_matrix``: optional starting inverse mass matrix (dense: the covariance of the
    unconstrained latent sites in sorted name order, e.g. of an earlier posterior); with
    ``adapt_mass_matrix=False`` it is kept and the warmup only adapts the step size.
    """
    import jax
    from numpyro.infer import MCMC

    kernel, bar = _progress_kernel(
        model,
        chains * (warmup + draws),
        progress,
        target_accept_prob=target_accept,
        max_tree_depth=max_tree_depth,
        init_strategy=start_strategy(model),
        dense_mass=dense_mass,
        inverse_mass_matrix=inverse_mass_matrix,
        adapt_mass_matrix=adapt_mass_matrix,
    )
    # jit_model_args: the model arguments (the padded catalogue, model.compile_args) reach the
    # compiled sample function as arguments, not constants
    mcmc = MCMC(
        kernel,
        jit_model_args=True,
        num_warmup=warmup,
        num_samples=draws,
        num_chains=chains,
        chain_method=_compiled_chain_map,
        progress_bar=False,
    )
    try:
        mcmc.run(
            jax.random.PRNGKey(seed),
            *getattr(model, "compile_args", ()),
            extra_fields=("diverging", "energy", "num_steps"),
            init_params=init_params,
        )
        # the run is dispatched asynchronously: wait for it, so that callers (and timings) see
        # finished chains
        jax.block_until_ready(mcmc.get_samples(group_by_chain=True))
        jax.effects_barrier()
        if bar is not None and bar.n < bar.total:
            bar.update(bar.total - bar.n)
    finally:
        if bar is not None:
            bar.close()
    return mcmc


@dataclasses.dataclass(frozen=True)
class Diagnostics:
    rhat_max: float
    ess_bulk_min: float
    ess_tail_min: float
    divergences: int
    bfmi_min: float
    worst_rhat: str
    worst_ess: str

    @property
    def converged(self):
        """r-hat < 1.01, bulk ESS > 400 and no divergences."""
        return self.rhat_max < RHAT_MAX and self.ess_bulk_min > ESS_MIN and self.divergences == 0

    def problems(self):
        """Plain-language reasons why the run is not converged (empty when it is)."""
        out = []
        if not np.isfinite(self.rhat_max):
            out.append("r-hat undefined (run at least 2 chains)")
        elif not self.rhat_max < RHAT_MAX:
            out.append(f"r-hat {self.rhat_max:.3f} >= {RHAT_MAX} ({self.worst_rhat})")
        if not self.ess_bulk_min > ESS_MIN:
            out.append(f"bulk ESS {self.ess_bulk_min:.0f} <= {ESS_MIN:.0f} ({self.worst_ess})")
        if self.divergences:
            out.append(f"{self.divergences} divergent transitions")
        return out

    def as_dict(self):
        return {
            "rhat_max": self.rhat_max,
            "ess_bulk_min": self.ess_bulk_min,
            "ess_tail_min": self.ess_tail_min,
            "divergences": self.divergences,
            "bfmi_min": self.bfmi_min,
        }


def _worst(values, pick):
    """max or min of finite values; inf for r-hat / 0 for ESS when none is finite (one chain)."""
    v = np.asarray(values, dtype=float).ravel()
    v = v[np.isfinite(v)]
    if v.size == 0:
        return float("inf") if pick is np.max else 0.0
    return float(pick(v))


def _per_var(ds):
    return {k: np.asarray(v) for k, v in ds.data_vars.items()}


def diagnostics(idata, var_names):
    """r-hat (rank-normalised), bulk and tail ESS over ``var_names``, divergences and BFMI."""
    import arviz as az

    post = idata["posterior"].to_dataset()[list(var_names)]
    rhat = _per_var(az.rhat(post))
    bulk = _per_var(az.ess(post, method="bulk"))
    tail = _per_var(az.ess(post, method="tail"))
    r_worst = {k: _worst(v, np.max) for k, v in rhat.items()}
    e_worst = {k: _worst(v, np.min) for k, v in bulk.items()}
    r_name = max(r_worst, key=lambda k: r_worst[k])
    e_name = min(e_worst, key=lambda k: e_worst[k])
    stats = idata["sample_stats"].to_dataset()
    div = int(np.asarray(stats["diverging"]).sum()) if "diverging" in stats else 0
    bfmi = float("nan")
    if "energy" in stats:
        bfmi = float(np.min(np.asarray(az.bfmi(idata).to_dataset()["energy"])))
    rmax = r_worst[r_name]
    return Diagnostics(
        rhat_max=rmax,
        ess_bulk_min=e_worst[e_name],
        ess_tail_min=min(_worst(v, np.min) for v in tail.values()),
        divergences=div,
        bfmi_min=bfmi,
        worst_rhat=r_name,
        worst_ess=e_name,
    )
