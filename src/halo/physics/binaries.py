"""Binary-star orbital motion: an orbit population and its line-of-sight velocity distribution.

A star in a binary moves about the binary's centre of mass, which adds a velocity ``v_b`` to the
systemic motion of the star in the satellite. This module provides

- ``BinaryPopulation``: the (frozen) parameters of the orbit population, with documented defaults;
- ``sample_orbits(pop, n, rng)``: a seeded Monte Carlo sample of orbits (numpy), Roche-lobe
  rejection included;
- ``los_velocity(orbits, t_days)``: the primary's line-of-sight velocity [km/s] at time t, so that
  one orbit can be observed at several epochs;
- ``fit_mixture(pop, n, seed)`` / ``load_mixture()``: a scale mixture of zero-mean Gaussians,
  P_b(v) = sum_k w_k N(v | 0, s_k^2), fitted to the single-epoch velocity distribution and cached
  as package data (``halo/data/binary_mixture.json``);

Regenerate the cached mixture with ``python -m halo.physics.binaries --regenerate`` (options
``--n`` and ``--seed``; defaults reproduce the shipped file).

The Monte Carlo is numpy precomputation (run once), not traced physics (the likelihood's
convolution of P_b with a Gaussian lives in :mod:`halo.inference.likelihood`). The population
and its sample live in :mod:`halo.physics.binary_population`, the orbits in
:mod:`halo.physics.binary_kepler` and the mixture in :mod:`halo.physics.binary_mixture`; this
module gathers them and is the entry point that regenerates the shipped mixture.
"""

import argparse
import json
from pathlib import Path

from halo.physics.binary_kepler import los_velocity, solve_kepler
from halo.physics.binary_mixture import (
    DEFAULT_N,
    DEFAULT_SEED,
    BinaryMixture,
    default_scales,
    fit_mixture,
    load_mixture,
)
from halo.physics.binary_population import (
    A_UNIT_RSUN,
    K_UNIT_KMS,
    BinaryPopulation,
    Orbits,
    roche_lobe_fraction,
    sample_orbits,
)

__all__ = [
    "BinaryPopulation",
    "Orbits",
    "sample_orbits",
    "los_velocity",
    "solve_kepler",
    "roche_lobe_fraction",
    "BinaryMixture",
    "fit_mixture",
    "load_mixture",
    "default_scales",
    "K_UNIT_KMS",
    "A_UNIT_RSUN",
    "DEFAULT_N",
    "DEFAULT_SEED",
]


def _main(argv=None):
    parser = argparse.ArgumentParser(
        prog="python -m halo.physics.binaries",
        description="Binary-star velocity mixture: regenerate the cached package data.",
    )
    parser.add_argument("--regenerate", action="store_true", help="refit and write the JSON")
    parser.add_argument("--n", type=int, default=DEFAULT_N, help="Monte Carlo orbits")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help="random seed")
    parser.add_argument("--output", type=Path, default=None, help="output file (default: package)")
    args = parser.parse_args(argv)
    if not args.regenerate:
        parser.print_help()
        return 0
    mix = fit_mixture(n=args.n, seed=args.seed)
    out = args.output or Path(__file__).parents[1] / "data" / "binary_mixture.json"
    out.write_text(json.dumps(mix.to_json(), indent=1) + "\n", encoding="utf-8")
    print(f"wrote {out}")
    for s, w in zip(mix.scales, mix.weights, strict=True):
        print(f"  s = {s:9.4f} km/s   w = {w:.5f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(_main())
