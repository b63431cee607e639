"""Benchmark: log10 J at four cone half-angles for many NFW parameter draws.

Run as ``.venv/bin/python benchmarks/bench_jfactor.py [--draws N] [--ref-draws M]``. Times
:func:`halo.physics.jfactor.log10_j_draws` after compilation (best of a few repeats) and compares
with a straightforward scipy reference (nested adaptive quadrature over angle and line of sight,
the same one the tests use as an independent oracle), measured in the same run on a few draws and
scaled per draw. Also prints the largest difference between the two.
"""

import argparse
import math
import time

import jax
import numpy as np
from scipy import integrate

import halo  # noqa: F401  (float64)
from halo.core.constants import MSUN2_KPC5_TO_GEV2_CM5
from halo.physics.dark import NFW
from halo.physics.jfactor import log10_j_draws

ANGLES_DEG = (0.1, 0.2, 0.5, 1.0)


def _nfw_rho2(rho_s, r_s):
    def rho2(r):
        x = r / r_s
        return (rho_s / (x * (1.0 + x) ** 2)) ** 2

    return rho2


def scipy_log10_j(rho_s, r_s, d, theta_deg, epsrel=1e-9):
    """J = 2 pi Int_0^theta sin(a) Int_0^inf rho^2 dl da by nested scipy.integrate.quad.

    The line of sight is split at the closest approach to the centre (u = l - d cos a = 0) and at
    u = b, 10 b, r_s, 10 r_s (b = d sin a); the angle integral at asin(r_s / d).
    """
    rho2 = _nfw_rho2(rho_s, r_s)

    def los(a):
        b, c = d * math.sin(a), d * math.cos(a)
        g = lambda u: rho2(math.sqrt(b * b + u * u))  # noqa: E731
        tot = 0.0
        for hi in (math.inf, c):  # far side, near side
            edges = [0.0, *sorted(p for p in (b, 10 * b, r_s, 10 * r_s) if p < hi), hi]
            for lo_, hi_ in zip(edges[:-1], edges[1:], strict=True):
                tot += integrate.quad(g, lo_, hi_, epsabs=0, epsrel=epsrel, limit=200)[0]
        return tot

    theta = math.radians(theta_deg)
    a_s = math.asin(min(r_s / d, 1.0))
    edges = [0.0, a_s, theta] if a_s < theta else [0.0, theta]
    val = sum(
        integrate.quad(
            lambda a: 2 * math.pi * math.sin(a) * los(a),
            lo_,
            hi_,
            epsabs=0,
            epsrel=epsrel,
            limit=200,
        )[0]
        for lo_, hi_ in zip(edges[:-1], edges[1:], strict=True)
    )
    return math.log10(val * MSUN2_KPC5_TO_GEV2_CM5)


def draws(n, seed=0):
    rng = np.random.default_rng(seed)
    rho_s = 10 ** rng.uniform(6.5, 9.0, n)  # Msun / kpc^3
    r_s = 10 ** rng.uniform(-1.5, 0.5, n)  # kpc
    d = rng.normal(76.0, 5.0, n)  # kpc
    return rho_s, r_s, d


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--draws", type=int, default=10_000)
    ap.add_argument("--ref-draws", type=int, default=4)
    ap.add_argument("--repeats", type=int, default=5)
    args = ap.parse_args()

    rho_s, r_s, d = draws(args.draws)
    profiles = NFW(rho_s=jax.numpy.asarray(rho_s), r_s=jax.numpy.asarray(r_s))
    angles = np.array(ANGLES_DEG)

    t0 = time.perf_counter()
    out = log10_j_draws(profiles, d, angles).block_until_ready()
    t_first = time.perf_counter() - t0
    times = []
    for _ in range(args.repeats):
        t0 = time.perf_counter()
        out = log10_j_draws(profiles, d, angles).block_until_ready()
        times.append(time.perf_counter() - t0)
    t_jax = min(times)

    m = args.ref_draws
    t0 = time.perf_counter()
    ref = np.array(
        [[scipy_log10_j(rho_s[i], r_s[i], d[i], th) for th in ANGLES_DEG] for i in range(m)]
    )
    t_ref = (time.perf_counter() - t0) * args.draws / m

    print(f"devices: {jax.devices()}")
    print(f"log10 J at {ANGLES_DEG} deg for {args.draws} NFW draws")
    print(f"  halo.physics.jfactor (first call, incl. compile): {t_first:.3f} s")
    print(f"  halo.physics.jfactor (compiled, best of {args.repeats}): {t_jax:.3f} s")
    print(f"  scipy nested quad ({m} draws, scaled to {args.draws}): {t_ref:.1f} s")
    print(f"  speed-up: {t_ref / t_jax:.0f}x")
    print(f"  max |log10 J - scipy| over the reference draws: {np.max(np.abs(out[:m] - ref)):.1e}")


if __name__ == "__main__":
    main()
