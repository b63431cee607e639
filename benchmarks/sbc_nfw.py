"""Simulation-based calibration of the default `nfw` spec with `halo calibrate` on the batch runner.

Run (the full size, hours on 2 cores):
    .venv/bin/python benchmarks/sbc_nfw.py --mocks 200 --stars 100 --workers 2

A robustness run (mocks the fit does not assume), e.g.:
    .venv/bin/python benchmarks/sbc_nfw.py --mocks 20 --name sbc_nfw_flattened \
        --calibrate-options="--mock-flattening 0.4"
(benchmarks/robustness.py runs the set and compares them with the default run.)

A tiny version (minutes), to check that it runs, not to judge the calibration:
    .venv/bin/python benchmarks/sbc_nfw.py --mocks 4 --stars 30 --chains 2 --warmup 50 \
        --draws 50 --name sbc_nfw_tiny

Truths from the full prior of models/nfw.toml and of the demo satellite file (distance, r_half,
stellar mass; v_sys ~ N(0, 10) km/s since the file gives no v_sys prior), binary fraction
uniform in [0, 1], field-star fraction uniform in [0, 0.2], one epoch; fits with product defaults
(4 chains x 1000 + 1000, binaries on, foreground decided per catalogue) unless told otherwise.
Targets (issue: calibration of the whole pipeline): every rank histogram consistent with uniform
(chi-square and KS p > 0.01) for M(<r_1/2), log10 J(0.5 deg), f_binary and v_sys.

Writes under benchmarks/results/: <name>.txt (the command line, the numbers `halo calibrate`
printed, its wall time), <name>.json (calibration.json) and <name>_ranks.png (the rank
histograms); the fits themselves stay in the --work folder (default a temporary one).
"""

import argparse
import shlex
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

RESULTS = Path(__file__).resolve().parent / "results"


def _args():
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--mocks", type=int, default=200)
    p.add_argument("--stars", type=int, default=100)
    p.add_argument("--workers", type=int, default=2)
    p.add_argument("--chains", type=int, default=4)
    p.add_argument("--warmup", type=int, default=1000)
    p.add_argument("--draws", type=int, default=1000)
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("--spec", default="nfw")
    p.add_argument("--name", default="sbc_nfw")
    p.add_argument("--work", default=None, help="folder for the mocks and fits (kept)")
    p.add_argument(
        "--calibrate-options",
        default="",
        help="more `halo calibrate` options as one string, e.g. '--mock-flattening 0.4'",
    )
    return p.parse_args()


def main():
    a = _args()
    work = Path(a.work) if a.work else Path(tempfile.mkdtemp(prefix="halo-sbc-"))
    out = work / a.name
    cmd = ["calibrate", a.spec, "--out", str(out), "--mocks", str(a.mocks)]
    cmd += ["--stars", str(a.stars), "--workers", str(a.workers), "--chains", str(a.chains)]
    cmd += ["--warmup", str(a.warmup), "--draws", str(a.draws), "--seed", str(a.seed)]
    cmd += shlex.split(a.calibrate_options)
    t0 = time.perf_counter()
    res = subprocess.run(
        [sys.executable, "-m", "halo.cli", *cmd], stdout=subprocess.PIPE, text=True
    )
    wall = time.perf_counter() - t0
    if res.returncode not in (0, 1):
        raise SystemExit(f"halo calibrate failed ({res.returncode}):\n{res.stdout}")
    RESULTS.mkdir(exist_ok=True)
    script = "benchmarks/sbc_nfw.py " + shlex.join(sys.argv[1:])
    text = (
        f"# made by: .venv/bin/python {script}\n# which ran: halo {shlex.join(cmd)}\n"
        f"# wall time {wall:.0f} s on {a.workers} workers\n\n{res.stdout}"
    )
    (RESULTS / f"{a.name}.txt").write_text(text)
    shutil.copyfile(out / "calibration.json", RESULTS / f"{a.name}.json")
    shutil.copyfile(out / "rank_histograms.png", RESULTS / f"{a.name}_ranks.png")
    print(text)
    print(f"mocks and fits in {out}")


if __name__ == "__main__":
    main()
