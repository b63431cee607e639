"""Robustness of the default `nfw` pipeline: `halo calibrate` on mocks the fit does not assume,
against the same truths with the default mocks, and how far each result moves.

Run (about 18 min per variant at 16 mocks of 100 stars on 2 workers):
    .venv/bin/python benchmarks/robustness.py --mocks 16 --work /work/sbc_runs/robust

Variants (every one with the same seed, so the same prior draws, field-star counts and mock
seeds as the default; only what the variant changes differs):
- default: the calibration mocks (two-component field, the spec's binary periods, a spherical
  tracer);
- periods: binary periods log10 P/d ~ N(3.0, 1.5) in the mocks (shorter than the spec's
  N(5.03, 2.28) that the fit assumes, so more binaries with large orbital speeds);
- field: field stars from 0:25:0.4,80:60:0.6 (offset:sigma:weight [km/s]), a component right
  under the satellite's velocities;
- flattened: an oblate tracer of intrinsic axis ratio 0.4 inclined to the satellite's
  ellipticity 0.3 (51 deg), the fit spherical.

Per variant and quantity: rank bias (mean rank / L - 1/2, its standard error), 68%/95% coverage,
KS p of the ranks, and the shift of the result against the default mocks of the same truth,
dz = z_variant - z_default with z = (posterior median - truth) / posterior sd (mean +- standard
error over the mocks); for ln B (nfw against stars-only) its mean shift. Writes
benchmarks/results/robustness.txt and robustness.json (the four calibration.json files are
kept under --work).
"""

import argparse
import json
import math
import shlex
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

RESULTS = Path(__file__).resolve().parent / "results"
VARIANTS = {
    "default": "",
    "periods": "--mock-binary-periods 3.0,1.5",
    "field": "--mock-field 0:25:0.4,80:60:0.6",
    "flattened": "--mock-flattening 0.4",
}


def _run(name, options, a):
    cmd = [sys.executable, str(Path(__file__).with_name("sbc_nfw.py")), "--mocks", str(a.mocks)]
    cmd += ["--stars", str(a.stars), "--workers", str(a.workers), "--work", a.work]
    cmd += ["--name", f"robust_{name}", f"--calibrate-options={options}"]
    t0 = time.perf_counter()
    subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL)
    return time.perf_counter() - t0


def _z(entry, key):
    post = (entry.get("posterior") or {}).get(key)
    if not post or not post["sd"] > 0:
        return math.nan
    return (post["median"] - entry["truth"][key]) / post["sd"]


def _compare(results):
    base = {e["name"]: e for e in results["default"]["entries"] if e["status"] == "done"}
    out = {}
    for name, res in results.items():
        row = {"violations": res["design"].get("model_violations"), "quantities": {}}
        for key, q in res["quantities"].items():
            dz = []
            for e in res["entries"]:
                if e["status"] == "done" and e["name"] in base:
                    dz.append(_z(e, key) - _z(base[e["name"]], key))
            dz = np.array([v for v in dz if np.isfinite(v)])
            row["quantities"][key] = {
                "label": q["label"],
                "n": q["n"],
                "rank_bias": q["rank_bias"],
                "coverage_68": q["coverage"]["0.68"]["fraction"],
                "coverage_95": q["coverage"]["0.95"]["fraction"],
                "ks_p": q["ks"]["p_value"],
                "z_mean": (q.get("z") or {}).get("mean"),
                "dz_mean": float(dz.mean()) if dz.size else None,
                "dz_se": float(dz.std(ddof=1) / math.sqrt(dz.size)) if dz.size > 1 else None,
            }
        d_lnb = [
            e["ln_b"]["nfw"] - base[e["name"]]["ln_b"]["nfw"]
            for e in res["entries"]
            if e["status"] == "done" and e["name"] in base and (e.get("ln_b") or {}).get("nfw")
        ]
        row["ln_b_shift"] = {
            "mean": float(np.mean(d_lnb)) if d_lnb else None,
            "se": float(np.std(d_lnb, ddof=1) / math.sqrt(len(d_lnb))) if len(d_lnb) > 1 else None,
        }
        row["unconverged"] = res["unconverged"]
        out[name] = row
    return out


def _format(cmp, a, walls):
    lines = [
        "# made by: .venv/bin/python benchmarks/robustness.py " + shlex.join(sys.argv[1:]),
        f"# {a.mocks} prior draws of models/nfw.toml, {a.stars} stars, product fit defaults; "
        "the same truths in every variant",
        "# rank bias: mean rank / L - 1/2 (positive: the posterior sits below the truth); dz: "
        "shift of (median - truth) / sd against the default mocks of the same truth",
        "",
    ]
    for name, row in cmp.items():
        lines.append(f"{name} ({walls.get(name, float('nan')):.0f} s): " + "; ".join(
            row["violations"] or []
        ))  # fmt: skip
        for q in row["quantities"].values():
            b = q["rank_bias"]
            dz = "" if q["dz_mean"] is None or name == "default" else (
                f", dz {q['dz_mean']:+.2f} +- {q['dz_se']:.2f}"
            )  # fmt: skip
            lines.append(
                f"  {q['label']}: rank bias {b['value']:+.3f} +- {b['standard_error']:.3f}, "
                f"coverage {q['coverage_68']:.2f}/{q['coverage_95']:.2f}, KS p "
                f"{q['ks_p']:.2g}{dz}"
            )
        s = row["ln_b_shift"]
        if name != "default" and s["mean"] is not None:
            lines.append(f"  ln B (nfw): shift {s['mean']:+.2f} +- {s['se']:.2f}")
        if row["unconverged"]:
            lines.append(f"  NOT CONVERGED: {', '.join(row['unconverged'])}")
    return "\n".join(lines) + "\n"


def main():
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--mocks", type=int, default=16)
    p.add_argument("--stars", type=int, default=100)
    p.add_argument("--workers", type=int, default=2)
    p.add_argument("--work", required=True, help="folder for the mocks and fits (kept)")
    p.add_argument("--only", nargs="*", default=list(VARIANTS), help="variants to (re)run")
    a = p.parse_args()
    walls = {}
    for name in a.only:
        walls[name] = _run(name, VARIANTS[name], a)
        print(f"{name}: {walls[name]:.0f} s", file=sys.stderr)
    results = {}
    for name in VARIANTS:
        f = Path(a.work) / f"robust_{name}" / "calibration.json"
        if f.is_file():
            results[name] = json.loads(f.read_text())
    cmp = _compare(results)
    text = _format(cmp, a, walls)
    (RESULTS / "robustness.txt").write_text(text)
    (RESULTS / "robustness.json").write_text(json.dumps(cmp, indent=1))
    print(text)


if __name__ == "__main__":
    main()
