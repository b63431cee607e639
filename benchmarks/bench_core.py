"""The dynamics core in one run: the Jeans solver against scipy quad, then J-factors for draws.

Run:  .venv/bin/python benchmarks/bench_core.py

Prints, in one process, the output of benchmarks/bench_jeans.py (sigma_los for 100 radii, value
and value + gradient, speed and accuracy ratios against a straightforward scipy.integrate.quad
implementation measured in the same run) and of benchmarks/bench_jfactor.py (log10 J at four
angles for 10,000 parameter draws, against nested scipy quadrature). Each script also runs alone.
"""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import bench_jeans  # noqa: E402
import bench_jfactor  # noqa: E402

if __name__ == "__main__":
    argv = sys.argv
    sys.argv = argv[:1]  # each part parses its own (default) options
    print("=== Jeans solver ===")
    bench_jeans.main()
    print("\n=== J-factors ===")
    bench_jfactor.main()
