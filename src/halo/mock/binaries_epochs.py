"""The members' measurements: one row per star and epoch, measurement errors, binary orbital
motion, and which stars are observed again at the later epochs."""

from typing import NamedTuple

import numpy as np

from halo.physics.binaries import BinaryPopulation, los_velocity, sample_orbits

__all__ = [
    "Observations",
    "population",
    "epoch_rows",
    "repeat_mask",
    "binary_offsets",
    "observe_members",
]


class Observations(NamedTuple):
    """Measured rows of the members (per row, before ``keep`` is applied) and per-star binaries.

    ``star`` index of each row's star, ``mjd`` per row (None without epochs), ``err`` and
    ``vlos`` [km/s], ``keep`` the rows observed; per star ``is_binary``, ``period_days`` and
    ``k_kms`` (NaN for single stars).
    """

    star: np.ndarray
    mjd: np.ndarray | None
    err: np.ndarray
    vlos: np.ndarray
    keep: np.ndarray
    is_binary: np.ndarray
    period_days: np.ndarray
    k_kms: np.ndarray


def population(binary_population=None):
    """The binary orbit population: the one given, or :class:`BinaryPopulation` by default."""
    return BinaryPopulation() if binary_population is None else binary_population


def epoch_rows(n, epochs_mjd):
    """(epochs: [None] or the MJDs as floats, star index per row, mjd per row or None).

    Rows run epoch by epoch, every star at every epoch."""
    epochs = [None] if epochs_mjd is None else [float(m) for m in epochs_mjd]
    star = np.tile(np.arange(n), len(epochs))
    mjd = np.repeat(np.array(epochs, dtype=float), n) if epochs_mjd is not None else None
    return epochs, star, mjd


def repeat_mask(rng, n, star, first, repeat_fraction):
    """Rows kept: every ``first``-epoch row, and all rows of the stars (a ``repeat_fraction`` of
    the ``n``, drawn at random) observed again."""
    repeated = rng.uniform(size=n) < repeat_fraction
    return first | repeated[star]


def binary_offsets(rng, n_stars, star, mjd, binary_fraction, binary_population=None):
    """(orbital line-of-sight velocity per row [km/s], is_binary, period [day], K [km/s]).

    A ``binary_fraction`` of the stars, drawn at random, are binaries, each with its own orbit
    from the population; t = mjd - earliest epoch (0 without epochs)."""
    is_binary = rng.uniform(size=n_stars) < binary_fraction
    orb = sample_orbits(population(binary_population), n_stars, rng)
    t = np.zeros(star.size) if mjd is None else mjd - mjd.min()
    offsets = np.where(is_binary[star], los_velocity(orb.take(star), t), 0.0)
    period = np.where(is_binary, orb.period_days, np.nan)
    k = np.where(is_binary, orb.k_kms, np.nan)
    return offsets, is_binary, period, k


def observe_members(
    rng,
    v_true,
    v_sys,
    error_range,
    epochs_mjd,
    *,
    velocity_offsets=None,
    binary_fraction=0.0,
    binary_population=None,
    repeat_fraction=1.0,
):
    """Measurements of stars with true line-of-sight velocities ``v_true`` [km/s].

    Observed vlos = v_sys + v_true (+ offsets from the ``velocity_offsets`` hook and binary
    orbits) + N(0, err), err uniform in ``error_range`` [km/s]. Returns :class:`Observations`.
    """
    n_stars = v_true.size
    _, star, mjd = epoch_rows(n_stars, epochs_mjd)
    n_rows = star.size
    err = rng.uniform(error_range[0], error_range[1], size=n_rows)
    offsets = np.zeros(n_rows)
    if velocity_offsets is not None:
        offsets = np.asarray(velocity_offsets(rng, star, mjd), dtype=float).reshape(n_rows)
    is_binary = np.zeros(n_stars, dtype=bool)
    period, k = np.full(n_stars, np.nan), np.full(n_stars, np.nan)
    if binary_fraction > 0:
        orbital, is_binary, period, k = binary_offsets(
            rng, n_stars, star, mjd, binary_fraction, binary_population
        )
        offsets = offsets + orbital
    vlos = v_sys + v_true[star] + offsets + err * rng.standard_normal(n_rows)
    keep = np.ones(n_rows, dtype=bool)
    if mjd is not None and repeat_fraction < 1:
        keep = repeat_mask(rng, n_stars, star, mjd == mjd.min(), repeat_fraction)
    return Observations(star, mjd, err, vlos, keep, is_binary, period, k)
