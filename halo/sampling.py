"""NUTS on CPU (numpyro) and convergence diagnostics (arviz).

Chains run in parallel on host devices when JAX has enough of them: the device count must be set
before JAX starts (the command line does it with :func:`set_host_devices`); otherwise they run one
after the other, with the same results for the same seed.
"""

import dataclasses
import os

import numpy as np

__all__ = [
    "set_host_devices",
    "run_nuts",
    "Diagnostics",
    "diagnostics",
    "RHAT_MAX",
    "ESS_MIN",
]

RHAT_MAX = 1.01
ESS_MIN = 400.0


def set_host_devices(n):
    """Ask XLA for ``n`` CPU devices so that chains can run in parallel. Call before JAX starts."""
    flags = os.environ.get("XLA_FLAGS", "")
    if "xla_force_host_platform_device_count" not in flags:
        os.environ["XLA_FLAGS"] = f"{flags} --xla_force_host_platform_device_count={n}".strip()


def run_nuts(
    model,
    *,
    chains=4,
    warmup=1000,
    draws=1000,
    seed=0,
    progress=True,
    target_accept=0.9,
    max_tree_depth=10,
):
    """Run NUTS on ``model`` and return the numpyro MCMC object (samples, extra fields).

    Initial points are drawn uniformly in (-1, 1) of the unconstrained space, independently per
    chain from ``seed``; the run is reproducible run to run.
    """
    import jax
    from numpyro.infer import MCMC, NUTS, init_to_uniform

    method = "parallel" if jax.local_device_count() >= chains else "sequential"
    kernel = NUTS(
        model,
        target_accept_prob=target_accept,
        max_tree_depth=max_tree_depth,
        init_strategy=init_to_uniform(radius=1.0),
    )
    mcmc = MCMC(
        kernel,
        num_warmup=warmup,
        num_samples=draws,
        num_chains=chains,
        chain_method=method,
        progress_bar=progress,
    )
    mcmc.run(jax.random.PRNGKey(seed), extra_fields=("diverging", "energy", "num_steps"))
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
        if not self.rhat_max < RHAT_MAX:
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


def _per_var(ds):
    return {k: np.asarray(v) for k, v in ds.data_vars.items()}


def diagnostics(idata, var_names):
    """r-hat (rank-normalised), bulk and tail ESS over ``var_names``, divergences and BFMI."""
    import arviz as az

    post = idata["posterior"].to_dataset()[list(var_names)]
    rhat = _per_var(az.rhat(post))
    bulk = _per_var(az.ess(post, method="bulk"))
    tail = _per_var(az.ess(post, method="tail"))
    r_name = max(rhat, key=lambda k: float(np.nanmax(rhat[k])))
    e_name = min(bulk, key=lambda k: float(np.nanmin(bulk[k])))
    stats = idata["sample_stats"].to_dataset()
    div = int(np.asarray(stats["diverging"]).sum()) if "diverging" in stats else 0
    bfmi = float("nan")
    if "energy" in stats:
        bfmi = float(np.min(np.asarray(az.bfmi(idata).to_dataset()["energy"])))
    rmax = float(np.nanmax(rhat[r_name]))
    return Diagnostics(
        rhat_max=rmax if np.isfinite(rmax) else float("inf"),
        ess_bulk_min=float(np.nanmin(bulk[e_name])),
        ess_tail_min=float(min(np.nanmin(v) for v in tail.values())),
        divergences=div,
        bfmi_min=bfmi,
        worst_rhat=r_name,
        worst_ess=e_name,
    )
