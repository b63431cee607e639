"""Compile once: the catalogue padded to a bucket size leaves the log density unchanged, and two
different catalogues of similar size share one compiled sampling program.

The padded model is built as `halo fit` builds it (halo.pipeline.likelihoods.Likelihoods, then
halo.inference.model.make_model; the sampler runs it with ``model.compile_args``, the stars padded
to their bucket by halo.inference.padding).
"""

import json
import os
import subprocess
import sys
import textwrap

import jax
import numpy as np
import pytest
from astropy.table import Table
from numpyro import handlers
from numpyro.infer.util import log_density

from halo.inference.model import Foreground, make_model
from halo.inference.padding import bucket_size
from halo.inputs.catalogue import stars_from_table
from halo.inputs.satellite import parse_satellite
from halo.inputs.spec import load_spec
from halo.pipeline.likelihoods import Likelihoods
from halo.pipeline.settings import FitSettings

SAT = {
    "name": "Padding test",
    "ra_deg": 80.0,
    "dec_deg": 10.0,
    "distance_kpc": 40.0,
    "distance_err_kpc": 2.0,
    "r_half_pc": 30.0,
    "r_half_err_pc": 3.0,
    "stellar_mass_msun": 3000.0,
    "stellar_mass_err_msun": 900.0,
}


def _table(n, multi_epoch, member_prob, seed=0):
    rng = np.random.default_rng(seed)
    rows = []
    for k in range(n):
        ra = SAT["ra_deg"] + rng.normal(0.0, 0.02)
        dec = SAT["dec_deg"] + rng.normal(0.0, 0.02)
        n_ep = 1 + int(multi_epoch and k % 4 == 0)
        v = 50.0 + rng.normal(0.0, 4.0) + (80.0 if k % 9 == 5 else 0.0)
        p = 0.2 + 0.7 * rng.uniform()
        for e in range(n_ep):
            rows.append((f"s{k}", ra, dec, v + rng.normal(0, 1.0), 1.0, 58000.0 + 200.0 * e, p))
    t = Table(rows=rows, names=("id", "ra", "dec", "vlos", "vlos_err", "mjd", "member_prob"))
    return t if member_prob else t[["id", "ra", "dec", "vlos", "vlos_err", "mjd"]]


def _model(n, binaries, foreground, multi_epoch=False, member_prob=False):
    sat = parse_satellite(SAT)
    stars = stars_from_table(_table(n, multi_epoch, member_prob), sat, source="padding")
    spec = load_spec("nfw")
    settings = FitSettings(progress=False, binaries=binaries, n_orbits=2000)
    likes = Likelihoods(stars, settings, foreground)
    b, data, _ = likes.get(spec)
    fg = Foreground(sat.foreground) if foreground else None
    return make_model(spec, sat, data, binaries=b, foreground=fg)


CASES = [
    (False, False, False, False),
    (True, False, False, False),
    (False, True, False, False),
    (True, True, False, False),
    (True, True, True, False),
    (True, True, True, True),
    (False, True, False, True),
]


@pytest.mark.parametrize("binaries,foreground,multi_epoch,member_prob", CASES)
def test_padded_log_density_equals_unpadded(binaries, foreground, multi_epoch, member_prob):
    model = _model(37, binaries, foreground, multi_epoch, member_prob)
    (inputs,) = model.compile_args
    assert inputs["data"].v.shape[0] == 64 and float(inputs["data"].mask.sum()) == 37
    tr = handlers.trace(handlers.seed(model, 3)).get_trace()
    params = {
        k: s["value"] for k, s in tr.items() if s["type"] == "sample" and not s["is_observed"]
    }
    plain, _ = log_density(model, (), {}, params)
    padded, _ = log_density(model, model.compile_args, {}, params)
    assert np.isfinite(float(plain))
    assert abs(float(padded) - float(plain)) < 1e-12 * max(1.0, abs(float(plain)))
    grad = jax.grad(lambda p: log_density(model, model.compile_args, {}, p)[0])(params)
    assert all(np.all(np.isfinite(np.asarray(g))) for g in grad.values())


def test_bucket_sizes():
    assert [bucket_size(n) for n in (1, 30, 64, 65, 100, 200, 3000)] == [
        64,
        64,
        64,
        128,
        128,
        256,
        4096,
    ]


_TWO_CATALOGUES = textwrap.dedent(
    """
    import json, sys, jax
    jax.config.update("jax_compilation_cache_dir", sys.argv[1])
    jax.config.update("jax_persistent_cache_min_compile_time_secs", 0.0)
    sys.path.insert(0, sys.argv[2])
    from test_padding import _model
    from halo.inference.sampling import run_nuts
    compiles = []
    jax.monitoring.register_event_duration_secs_listener(
        lambda name, secs, **kw: compiles.append(secs)
        if name == "/jax/core/compile/backend_compile_duration" else None)
    out = []
    for n in (40, 50):
        before = len(compiles)
        run_nuts(_model(n, False, False), chains=2, warmup=20, draws=20, progress=False)
        out.append(max(compiles[before:], default=0.0))
    print(json.dumps(out))
    """
)


def test_two_catalogues_share_one_compiled_sampling_program(tmp_path):
    """The sampling program of a 50-star catalogue is not compiled again after a 40-star one
    (the longest backend compilation of the second run stays far below the first's)."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("JAX_COMPILATION")}
    here = os.path.dirname(__file__)
    proc = subprocess.run(
        [sys.executable, "-c", _TWO_CATALOGUES, str(tmp_path / "jax"), here],
        env=env,
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert proc.returncode == 0, proc.stderr[-2000:]
    first, second = json.loads(proc.stdout.strip().splitlines()[-1])
    assert first > 2.0, first  # the first catalogue compiled the sampling program
    assert second < 0.2 * first, (first, second)
