"""Where the time of a whole `halo fit` goes: per stage and per model, with product defaults.

Run:  .venv/bin/python benchmarks/bench_pipeline.py [--stars 100] [--chains 4 --warmup 1000
      --draws 1000] [--models nfw,cored]

Each fit is `python -m halo.cli fit` in a new process, exactly as users run it (binaries on,
foreground decided automatically, evidence, LOO, figures, report), on a mock of the demo
satellite (NFW halo M200 = 1e9 Msun, c200 = 20, Plummer stars, isotropic; 40% binaries, two
epochs a year apart for every star, 15% field stars) with a fresh compilation cache
(HALO_CACHE_DIR in a temporary folder). Then a second catalogue of the same size (another seed)
in a new process with that cache, as the next catalogue of an observer or of a calibration run.

Printed: the wall time of each stage of each model (from summary.json ``stage_times_s``),
leapfrog steps per iteration, time per gradient (sampling time / leapfrog steps, compilation
included, so an upper bound), bulk ESS of M(<r_1/2)'s site per second, and the second fit's
times as ratios against the first measured in the same run.
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def _mock(folder, n, seed):
    cmd = [sys.executable, "-m", "halo.cli", "mock", "demo", "--out", str(folder / "cat.ecsv")]
    cmd += ["--set", "m200=1e9", "--set", "c200=20", "--set", "beta=0", "--n-stars", str(n)]
    cmd += ["--v-sys", "50", "--seed", str(seed), "--binary-fraction", "0.4"]
    cmd += ["--epochs", "60000,60365", "--n-foreground", str(int(0.15 * n))]
    subprocess.run(cmd, check=True, capture_output=True)


def _fit(folder, args, env):
    cmd = [sys.executable, "-m", "halo.cli", "fit", str(folder / "cat.ecsv"), "demo"]
    cmd += ["--out", str(folder / "out"), "--quiet", "--seed", "1"]
    cmd += ["--chains", str(args.chains), "--warmup", str(args.warmup), "--draws", str(args.draws)]
    for m in args.models.split(","):
        cmd += ["--model", m]
    t0 = time.perf_counter()
    subprocess.run(cmd, check=True, capture_output=True, env=env)
    wall = time.perf_counter() - t0
    return wall, json.loads((folder / "out" / "summary.json").read_text())


def _steps(folder, name):
    import arviz as az

    idata = az.from_netcdf(str(folder / "out" / name / "posterior.nc"))
    stats = idata.sample_stats
    key = "num_steps" if "num_steps" in stats else "n_steps"
    return float(np.mean(stats[key].values)) if key in stats else float("nan")


def _rows(folder, wall, summary, args):
    rows = {}
    for name, m in summary["models"].items():
        st = m.get("stage_times_s") or {}
        steps = _steps(folder, name)
        n_it = args.chains * (args.warmup + args.draws)
        ess = m.get("diagnostics", {}).get("ess_bulk_min", float("nan"))
        samp = st.get("sampling", float("nan"))
        rows[name] = dict(st, steps=steps, ms_grad=1e3 * samp / (steps * n_it), ess_s=ess / samp)
    rows["(whole fit)"] = {"wall": wall, **{k: v for k, v in summary["stage_times_s"].items()
                                            if not isinstance(v, dict)}}  # fmt: skip
    return rows


def _print(title, rows, ref=None):
    print(f"\n{title}")
    for name, r in rows.items():
        parts = []
        for k, v in r.items():
            known = ref is not None and k in ref.get(name, {})
            ratio = f" ({v / ref[name][k]:.2f}x)" if known else ""
            parts.append(f"{k} {v:.3g}{ratio}")
        print(f"  {name:12s} " + ", ".join(parts))


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--stars", type=int, default=100)
    ap.add_argument("--chains", type=int, default=4)
    ap.add_argument("--warmup", type=int, default=1000)
    ap.add_argument("--draws", type=int, default=1000)
    ap.add_argument("--models", default="nfw,cored")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="halo-bench-") as tmp:
        env = {**os.environ, "HALO_CACHE_DIR": str(Path(tmp) / "cache")}
        env.pop("JAX_COMPILATION_CACHE_DIR", None)
        results = []
        for seed in (1, 2):
            folder = Path(tmp) / f"run{seed}"
            folder.mkdir()
            _mock(folder, args.stars, seed)
            wall, summary = _fit(folder, args, env)
            results.append(_rows(folder, wall, summary, args))
    print(
        f"halo fit of {args.stars} stars (+15% field), models {args.models} + stars-only, "
        f"{args.chains} x ({args.warmup} + {args.draws}); times in s, ms_grad in ms, "
        "ess_s = min bulk ESS per second of sampling"
    )
    _print("first catalogue, cold compilation cache", results[0])
    _print("second catalogue (new process, same cache): ratio to the first", results[1], results[0])


if __name__ == "__main__":
    main()
