"""Coverage of the binary fraction from two epochs a year apart (the epoch terms alone).

Each realisation: N stars, half of them binaries drawn orbit by orbit from the default population
(halo.physics.binaries.sample_orbits), observed twice 365 days apart with errors 0.3-0.6 km/s,
intrinsic dispersion 0.2 km/s. The posterior of the binary fraction (uniform prior) is computed on a
grid from the per-star single/binary likelihoods of halo.inference.likelihood, with the dispersion
and systemic velocity held at their true values (this isolates the multi-epoch binary term). Prints
each realisation and the bias and 95% coverage.

    python benchmarks/calibrate_binary_fraction.py [REALISATIONS] [N_STARS]
"""

import sys

import jax
import jax.numpy as jnp
import numpy as np
from astropy.table import Table

from halo.inference.likelihood import epoch_terms, member_log_terms
from halo.inputs.catalogue import stars_from_table
from halo.inputs.satellite import parse_satellite
from halo.physics.binaries import BinaryPopulation, load_mixture, los_velocity, sample_orbits

jax.config.update("jax_enable_x64", True)


def main(n_real=20, n=200, sig=0.2, fraction=0.5):
    sat = parse_satellite(
        {
            "name": "calibration",
            "ra_deg": 10.0,
            "dec_deg": 0.0,
            "distance_kpc": 30.0,
            "r_half_pc": 30.0,
            "stellar_mass_msun": 1e3,
        }
    )
    mix = load_mixture()
    fgrid = np.linspace(0.0005, 0.9995, 1999)
    rows = []
    for seed in range(n_real):
        rng = np.random.default_rng(seed)
        orb = sample_orbits(BinaryPopulation(), n, rng)
        isb = rng.uniform(size=n) < fraction
        t = np.array([0.0, 365.0])
        b = los_velocity(orb, t[:, None]) * isb
        err = rng.uniform(0.3, 0.6, (2, n))
        v = rng.normal(0, sig, n) + b + err * rng.standard_normal((2, n))
        tab = Table(
            {
                "id": np.tile(np.arange(n), 2),
                "ra": 10 + np.tile(rng.normal(0, 0.01, n), 2),
                "dec": np.zeros(2 * n),
                "vlos": v.ravel(),
                "vlos_err": err.ravel(),
                "mjd": np.repeat(t, n),
            }
        )
        s = stars_from_table(tab, sat, source="calibration")
        e = epoch_terms(s, mix, seed=1000 + seed)
        var = jnp.asarray(sig**2 + s.v_err**2)
        single, binary = member_log_terms(
            jnp.asarray(s.v), var, 0.0, e.log_c0, e.log_c1, e.log_w, e.scale, e.loc
        )
        single, binary = np.asarray(single), np.asarray(binary)
        ll = np.array(
            [np.sum(np.logaddexp(np.log1p(-f) + single, np.log(f) + binary)) for f in fgrid]
        )
        post = np.exp(ll - ll.max())
        cdf = np.cumsum(post) / post.sum()
        lo, med, hi = np.interp([0.025, 0.5, 0.975], cdf, fgrid)
        rows.append((isb.mean(), lo, med, hi))
        print(f"realised {isb.mean():.3f}  posterior {med:.3f} [{lo:.3f}, {hi:.3f}]", flush=True)
    m = np.array(rows)
    cover = np.mean((m[:, 1] < m[:, 0]) & (m[:, 0] < m[:, 3]))
    print(
        f"{n_real} realisations of {n} stars: mean (median - realised) = "
        f"{np.mean(m[:, 2] - m[:, 0]):+.3f}, 95% coverage = {cover:.2f}"
    )


if __name__ == "__main__":
    args = [int(a) for a in sys.argv[1:]]
    main(*args)
