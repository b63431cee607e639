"""What a rerun after adding 10 stars costs against a fresh fit (workspace refit, warm start).

Run:  .venv/bin/python benchmarks/bench_rerun.py [--chains 4 --warmup 1000 --draws 1000]

Mock: the demo satellite (halo.mock.catalogue, cored halo, distribution function), 110 stars with
30% binaries. Workspace A gets 100 stars and is fitted (nfw and stars-only, default likelihood:
binaries on, foreground automatic), then 10 more stars are added and `refit` runs again (warm
start from the previous posterior, shorter warmup). Workspace B fits all 110 stars from scratch
(the reference). A refit with nothing changed is timed too. Printed: wall times, ratios to the
fresh fit, and the headline results of both 110-star fits side by side.
"""

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np

from halo.inputs.satellite import read_satellite
from halo.mock.catalogue import make_mock
from halo.physics.cosmology import rho_crit
from halo.physics.dark import CoreNFW
from halo.pipeline.demo import demo_satellite_path
from halo.pipeline.fit import FitSettings
from halo.workspace.catalogues import add_catalogue
from halo.workspace.create import init_workspace
from halo.workspace.refit import refit
from halo.workspace.views import history, latest_run_folder


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--chains", type=int, default=4)
    ap.add_argument("--warmup", type=int, default=1000)
    ap.add_argument("--draws", type=int, default=1000)
    args = ap.parse_args()
    tmp = Path(tempfile.mkdtemp(prefix="halo-bench-rerun-"))
    sat = read_satellite(demo_satellite_path())
    dark = CoreNFW.from_m200_c200(1.5e9, 18.0, rho_c=rho_crit(), r_c=0.06, n=1.0)
    mock = make_mock(
        sat, dark, n_stars=110, v_sys=87.3, error_range_kms=(1.0, 2.5), seed=3,
        binary_fraction=0.3,
    )  # fmt: skip
    t = mock.table
    t.meta.clear()
    ids = np.asarray(t["id"])
    t[ids < 100].write(tmp / "first.ecsv", format="ascii.ecsv")
    t[ids >= 100].write(tmp / "more.ecsv", format="ascii.ecsv")
    t.write(tmp / "all.ecsv", format="ascii.ecsv")
    settings = FitSettings(chains=args.chains, warmup=args.warmup, draws=args.draws, progress=False)
    quiet = lambda *_: None  # noqa: E731
    a, b = tmp / "A", tmp / "B"
    init_workspace(a, demo_satellite_path(), ["nfw"])
    init_workspace(b, demo_satellite_path(), ["nfw"])
    add_catalogue(a, tmp / "first.ecsv")
    add_catalogue(b, tmp / "all.ecsv")
    times, folders = {}, {}
    for label, root, extra in (("A: 100 stars, fresh", a, None), ("B: 110 stars, fresh", b, None),
                               ("A: +10 stars, refit", a, "more"),
                               ("A: nothing changed", a, "none")):  # fmt: skip
        if extra == "more":
            add_catalogue(a, tmp / "more.ecsv")
        t0 = time.perf_counter()
        refit(root, settings, say=quiet)
        times[label] = time.perf_counter() - t0
        folders[label] = latest_run_folder(root)
    ref = times["B: 110 stars, fresh"]
    print(f"{args.chains} chains x ({args.warmup} + {args.draws}); models nfw, stars-only")
    for k, v in times.items():
        print(f"{k:>24}: {v:7.1f} s   ({v / ref:.2f} x the fresh 110-star fit)")
    ha, hb = history(a)[-1], history(b)[-1]
    for name in ha["models"]:
        ma, mb = ha["models"][name], hb["models"][name]
        qa, qb = ma["m_half_msun"], mb["m_half_msun"]
        print(
            f"{name:>11}: M(<r_1/2) refit {qa['median']:.3g} [{qa['p16']:.3g}, {qa['p84']:.3g}]"
            f"  fresh {qb['median']:.3g} [{qb['p16']:.3g}, {qb['p84']:.3g}]"
            f"  converged {ma['converged']} / {mb['converged']}"
        )
    import json

    print("per model: sampling time incl. compilation [s], min bulk ESS, ESS per sampling second")
    for label in ("A: +10 stars, refit", "B: 110 stars, fresh"):
        s = json.loads((folders[label] / "summary.json").read_text())
        for name, m in s["models"].items():
            t, ess = m["sampling_time_s"], m["diagnostics"]["ess_bulk_min"]
            print(
                f"{label:>24} {name:>11}: {t:6.1f} s  ESS {ess:6.0f}  {ess / t:6.1f}/s"
                f"  (whole model {m['time_s']:.1f} s)"
            )


if __name__ == "__main__":
    main()
