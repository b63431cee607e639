"""`halo batch` against single `halo fit` runs of the same entries: wall time and identical numbers.

Run:  .venv/bin/python benchmarks/bench_batch.py [--entries 20 --stars 100 --workers 2]
      [--chains 4 --warmup 1000 --draws 1000] [--model nfw] [--out benchmarks/results/batch.txt]

Mocks: `halo mock` of the demo satellite, shipped `nfw` spec at M200 = 1e9 Msun, c200 = 20,
errors 1-2 km/s, Gaussian method, one seed per entry; every fit without binaries and foreground
(the mocks have neither). In the same run, each in a new process:

1. every entry fitted alone by `halo fit` one after the other, with a fresh persistent compilation
   cache (the first fit compiles, the others reuse its programs), wall time of each;
2. `halo batch` of the same entries on a LocalCluster of ``--workers`` processes, with another
   fresh cache (its workers run single-threaded XLA, so their programs differ from (1)'s).

Printed: the sum of (1), the wall time of (2) and their ratio (target <= 0.6 for 20 entries on 2
workers), and whether every entry's summary (parameters, derived quantities, diagnostics,
evidence, LOO, comparison) equals its single fit's exactly.
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

KEYS = ("parameters", "derived", "diagnostics", "evidence", "loo", "vs_stars_only")


def _halo(args, cache, quiet=True):
    """Run `python -m halo.cli ARGS` with its own cache folder; returns its wall time [s]."""
    env = {**os.environ, "HALO_CACHE_DIR": str(cache)}
    t0 = time.perf_counter()
    res = subprocess.run(
        [sys.executable, "-m", "halo.cli", *args],
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.DEVNULL if quiet else None,
        text=True,
    )
    wall = time.perf_counter() - t0
    if res.returncode not in (0, 1):
        raise SystemExit(f"halo {' '.join(args[:2])} failed ({res.returncode}):\n{res.stdout}")
    return wall


def _mocks(folder, n, stars, cache):
    """n mock catalogues and the manifest listing them; returns the manifest path."""
    tables = []
    for i in range(n):
        cat = folder / f"mock{i:02d}.ecsv"
        _halo(
            ["mock", "demo", "--out", str(cat), "--model", "nfw", "--set", "m200=1e9"]
            + ["--set", "c200=20", "--n-stars", str(stars), "--errors", "1,2"]
            + ["--method", "gaussian", "--seed", str(100 + i)],
            cache,
        )
        tables.append(
            f'[[entry]]\nname = "e{i:02d}"\ncatalogue = "{cat.name}"\nsatellite = "demo.toml"\n'
            f"seed = {i}\n"
        )
    from halo.pipeline.demo import demo_satellite_path

    (folder / "demo.toml").write_text(Path(demo_satellite_path()).read_text())
    (folder / "manifest.toml").write_text("\n".join(tables))
    return folder / "manifest.toml"


def _compare(batch_dir, single_dirs):
    """Names of the entries whose batch summary differs from their single fit's."""
    differ = []
    for name, single in single_dirs.items():
        a = json.loads((batch_dir / name / "summary.json").read_text())["models"]
        b = json.loads((single / "summary.json").read_text())["models"]
        same = a.keys() == b.keys() and all(a[m].get(k) == b[m].get(k) for m in a for k in KEYS)
        differ += [] if same else [name]
    return differ


def _run(args, work):
    cache_single, cache_batch = work / "cache-single", work / "cache-batch"
    manifest = _mocks(work, args.entries, args.stars, cache_single)
    sampler = ["--chains", str(args.chains), "--warmup", str(args.warmup)]
    sampler += ["--draws", str(args.draws), "--no-binaries", "--no-foreground"]
    sampler += ["--model", args.model]
    singles, times = {}, []
    for i in range(args.entries):
        out = work / f"single{i:02d}"
        fit = ["fit", str(work / f"mock{i:02d}.ecsv"), str(work / "demo.toml")]
        fit += ["--out", str(out), "--seed", str(i), "--quiet"]
        times.append(_halo(fit + sampler, cache_single))
        singles[f"e{i:02d}"] = out
        print(f"single fit {i + 1}/{args.entries}: {times[-1]:.1f} s", file=sys.stderr)
    batch = ["batch", str(manifest), "--out", str(work / "batch"), "--workers", str(args.workers)]
    t_batch = _halo(batch + sampler, cache_batch, quiet=False)
    recs = json.loads((work / "batch" / "batch.json").read_text())
    return times, t_batch, recs, _compare(work / "batch", singles)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--entries", type=int, default=20)
    ap.add_argument("--stars", type=int, default=100)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--chains", type=int, default=4)
    ap.add_argument("--warmup", type=int, default=1000)
    ap.add_argument("--draws", type=int, default=1000)
    ap.add_argument("--model", default="nfw")
    ap.add_argument("--out", default=None, help="also write the report to this file")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="bench-batch-") as tmp:
        times, t_batch, recs, differ = _run(args, Path(tmp))
    done = sum(r["status"] == "done" for r in recs)
    worker_times = sorted(r["wall_time_s"] for r in recs if r.get("wall_time_s"))
    rest = sorted(times[1:]) or [float("nan")]
    lines = [
        "command: .venv/bin/python benchmarks/bench_batch.py " + " ".join(sys.argv[1:]),
        f"entries {args.entries} x {args.stars} stars, model {args.model} (+ stars-only), "
        f"{args.chains} chains x ({args.warmup} + {args.draws}), {args.workers} workers, "
        f"{os.cpu_count()} cores",
        f"single halo fit runs: sum {sum(times):.1f} s (first {times[0]:.1f} s, "
        f"median of the rest {rest[len(rest) // 2]:.1f} s)",
        f"halo batch: {t_batch:.1f} s wall ({done}/{len(recs)} done; per entry in the workers: "
        f"{worker_times[0]:.1f}-{worker_times[-1]:.1f} s, sum {sum(worker_times):.1f} s)",
        f"ratio batch / sum of single fits: {t_batch / sum(times):.2f} (target <= 0.6 at 20 "
        "entries on 2 workers)",
        "identical numbers to the single fits: "
        + ("yes, every entry" if not differ else f"NO for {', '.join(differ)}"),
    ]
    text = "\n".join(lines)
    print(text)
    if args.out:
        Path(args.out).write_text(text + "\n")


if __name__ == "__main__":
    main()
