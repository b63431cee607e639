"""Speed and accuracy of the Jeans solver against a straightforward scipy.integrate.quad version.

Run:  .venv/bin/python benchmarks/bench_jeans.py [--quad-radii N] [--prior-sweep]

--prior-sweep: instead, the maximum relative error of DEFAULT and FAST against the reference over
the shipped specs' anisotropy prior (beta / (2 - beta) from -0.95 to 0.95, beta -38 to 0.974),
NFW and Burkert halos, 0.01-10 R_e (the levels halo/physics/jeans.py states).

Model: NFW halo (rho_s = 3e7 Msun/kpc^3, r_s = 0.6 kpc) plus Plummer stars (2e4 Msun,
R_e = 30 pc), constant beta = 0.3, sigma_los at 100 log-spaced radii from 0.01 to 10 R_e.

- truth: the Mamon & Lokas (2005) kernel form by nested adaptive quadrature at epsrel 1e-10
  (tests/jeans_reference.py)
- quad: the two nested integrals as they stand (radial Jeans integral inside the projection
  integral), scipy.integrate.quad at its default tolerances; timed on --quad-radii radii and scaled
  to 100; its gradient is 2 x 5 + 1 evaluations (central finite differences in 5 parameters)
- halo: halo.physics.jeans.sigma_los, jitted, after compilation, DEFAULT and FAST orders; value and
  value + gradient (reverse mode, all 5 parameters)

Targets (issue): value + gradient for 100 radii <= 1 ms; >= 1000 x faster than quad at equal or
better accuracy.
"""

import argparse
import sys
import time
from pathlib import Path

import jax
import jax.numpy as jnp
import numpy as np
from scipy import integrate

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

import halo  # noqa: E402,F401
from halo.core.constants import G  # noqa: E402
from halo.physics.anisotropy import Constant  # noqa: E402
from halo.physics.dark import NFW  # noqa: E402
from halo.physics.jeans import DEFAULT, FAST, Orders, sigma_los  # noqa: E402
from halo.physics.light import Plummer  # noqa: E402
from halo.physics.mass import MassModel, Stars  # noqa: E402

from jeans_reference import (  # noqa: E402
    beta_np,
    burkert_mass_np,
    nfw_mass_np,
    sigma_los_reference,
)

RHO_S, R_S, A, BETA, M_STAR = 3e7, 0.6, 0.03, 0.3, 2e4
RADII = np.geomspace(0.01, 10.0, 100) * A


def quad_sigma_los(R, epsrel=1.49e-8, rho_s=RHO_S, r_s=R_S, a=A, beta=BETA, m_star=M_STAR):
    """Straightforward nested quad of nu sigma_r^2 and its projection (relative tolerance)."""
    m_nfw = nfw_mass_np(rho_s, r_s)

    def nu(r):
        return 3 / (4 * np.pi * a**3) * (1 + (r / a) ** 2) ** -2.5

    def mass(r):
        return m_nfw(r) + m_star * r**3 / (r**2 + a**2) ** 1.5

    def nu_sr2(r):  # (1/f) Int_r^inf f nu G M / s^2 ds, f = s^(2 beta)
        val = integrate.quad(
            lambda s: s ** (2 * beta) * nu(s) * G * mass(s) / s**2, r, np.inf, epsrel=epsrel
        )[0]
        return val / r ** (2 * beta)

    def proj(r):
        return (1 - beta * R**2 / r**2) * nu_sr2(r) * r / np.sqrt(r**2 - R**2)

    val = integrate.quad(proj, R, np.inf, epsrel=epsrel)[0]
    sigma = 1 / (np.pi * a**2) / (1 + (R / a) ** 2) ** 2
    return np.sqrt(2 * val / sigma)


def timeit(fn, repeat):
    best = np.inf
    for _ in range(3):
        t0 = time.perf_counter()
        for _ in range(repeat):
            fn()
        best = min(best, (time.perf_counter() - t0) / repeat)
    return best


def prior_sweep():
    """Max relative error of DEFAULT and FAST over the anisotropy prior (constant beta)."""
    from halo.physics.dark import Burkert

    radii = np.array([0.01, 0.03, 0.1, 0.3, 1.0, 3.0, 10.0]) * A
    light = Plummer(A)
    halos = (
        ("nfw", NFW(RHO_S, R_S), nfw_mass_np(RHO_S, R_S)),
        ("burkert", Burkert(2e8, 0.3), burkert_mass_np(2e8, 0.3)),
    )
    print(f"{'beta~':>7s}{'beta':>8s}  {'halo':<8s}{'DEFAULT':>10s}{'FAST':>10s}")
    for bs in (-0.95, -0.9, -0.7, -0.5, 0.0, 0.5, 0.9, 0.95):
        beta = 2 * bs / (1 + bs)
        b, f = beta_np("constant", {"beta": beta})
        for name, jax_halo, np_mass in halos:
            ref = np.array([sigma_los_reference(R, np_mass, A, b, f, M_STAR) for R in radii])
            model = MassModel((jax_halo, Stars(light, M_STAR)))
            errs = [
                np.max(
                    np.abs(np.asarray(sigma_los(model, light, Constant(beta), radii, o)) / ref - 1)
                )
                for o in (DEFAULT, FAST)
            ]
            print(f"{bs:7.2f}{beta:8.2f}  {name:<8s}{errs[0]:10.1e}{errs[1]:10.1e}")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quad-radii", type=int, default=10, help="radii timed for quad (scaled)")
    ap.add_argument("--prior-sweep", action="store_true", help="errors over the beta prior")
    args = ap.parse_args()
    if args.prior_sweep:
        prior_sweep()
        return

    t0 = time.perf_counter()
    b, f = beta_np("constant", {"beta": BETA})
    truth = np.array(
        [sigma_los_reference(R, nfw_mass_np(RHO_S, R_S), A, b, f, M_STAR) for R in RADII]
    )
    print(f"truth (nested kernel quadrature, epsrel 1e-10): {time.perf_counter() - t0:.1f} s")

    # quad baselines at three tolerances (default 1.49e-8, and looser ones for matched accuracy)
    idx = np.linspace(0, len(RADII) - 1, args.quad_radii).astype(int)
    quad_rows = []
    for eps in (1.49e-8, 1e-6, 1e-4):
        t0 = time.perf_counter()
        quad_vals = np.array([quad_sigma_los(RADII[i], eps) for i in idx])
        t_quad = (time.perf_counter() - t0) * len(RADII) / len(idx)
        err_quad = np.max(np.abs(quad_vals / truth[idx] - 1))
        quad_rows.append((f"quad {eps:.0e}", t_quad, 11 * t_quad, err_quad))

    theta = jnp.array([RHO_S, R_S, A, BETA, M_STAR])
    R = jnp.asarray(RADII)

    def model(t, orders):
        light = Plummer(t[2])
        mm = MassModel((NFW(t[0], t[1]), Stars(light, t[4])))
        return sigma_los(mm, light, Constant(t[3]), R, orders)

    rows = []
    high = Orders(n_grid=480, n_panel=6, n_proj=96, n_proj_panels=3, lo_dex=-4.0, n_ap=64)
    for name, orders in (("DEFAULT", DEFAULT), ("FAST", FAST), ("HIGH", high)):
        val = jax.jit(lambda t, o=orders: model(t, o))
        vg = jax.jit(jax.value_and_grad(lambda t, o=orders: jnp.sum(jnp.log(model(t, o)))))
        out = val(theta).block_until_ready()
        jax.block_until_ready(vg(theta))
        err = float(np.max(np.abs(np.asarray(out) / truth - 1)))
        t_v = timeit(lambda v=val: v(theta).block_until_ready(), 200)
        t_vg = timeit(lambda g=vg: jax.block_until_ready(g(theta)), 200)
        rows.append((name, t_v, t_vg, err))

    print(f"\nsigma_los at {len(RADII)} radii, 0.01-10 R_e (NFW + Plummer stars, beta = {BETA})")
    print(f"{'method':<14s}{'value [ms]':>12s}{'value+grad [ms]':>17s}{'max rel err':>13s}")
    for name, t_v, t_vg, err in quad_rows + [("halo " + r[0], *r[1:]) for r in rows]:
        print(f"{name:<14s}{t_v * 1e3:12.3f}{t_vg * 1e3:17.3f}{err:13.1e}")
    print("\nratios against the fastest quad run that is no more accurate than each halo run:")
    print(
        f"{'halo':<10s}{'quad':<12s}{'speed-up value':>16s}{'speed-up v+g':>14s}{'err ratio':>11s}"
    )
    for name, t_v, t_vg, err in rows:
        ok = [q for q in quad_rows if q[3] >= err] or [min(quad_rows, key=lambda q: q[3])]
        q = max(ok, key=lambda q: q[1])
        print(f"{name:<10s}{q[0]:<12s}{q[1] / t_v:16.0f}{q[2] / t_vg:14.0f}{err / q[3]:11.2g}")
    print("\ntargets: value+grad <= 1 ms; speed-up >= 1000 at err ratio <= 1 (halo at least as")
    print(f"accurate). quad timed on {len(idx)} radii and scaled; its gradient = 11 evaluations.")


if __name__ == "__main__":
    main()
