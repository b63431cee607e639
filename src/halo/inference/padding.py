"""Catalogues padded to a few bucket sizes, so that one compiled program serves them all.

The sampled model takes the catalogue as an argument of the compiled program (not as constants
inside it); padding every per-star array to the next bucket size (64, 128, 256, ... stars) makes a
second catalogue of similar size, a refit after adding a few stars and the many small fits of the
test suite the same program, found in memory or in the persistent compilation cache. A padded star
is a copy of the first star (so every term stays finite, with finite gradients) with ``mask`` 0;
the observed site is masked, so padded stars contribute exactly 0 to the log density.
"""

import dataclasses

import jax.numpy as jnp
import numpy as np

__all__ = ["BUCKET_MIN", "bucket_size", "pad_stars"]

#: the smallest bucket [stars]: the Jeans solve, not the stars, dominates the cost of small fits
BUCKET_MIN = 64
#: per-star fields whose padded entries are ln 0.5 (a neutral prior membership)
_LOG_HALF_FIELDS = ("log_prior_member", "log_prior_non")
#: fields that are not per star
_GLOBAL_FIELDS = ("grid_theta", "theta_max")


def bucket_size(n):
    """The bucket of a catalogue of ``n`` stars: the next power of two, at least BUCKET_MIN."""
    return max(BUCKET_MIN, 1 << max(int(n) - 1, 0).bit_length())


def _pad(name, x, n, size):
    a = np.asarray(x)
    if name in _LOG_HALF_FIELDS:
        fill = np.full((size - n,) + a.shape[1:], np.log(0.5))
    else:
        fill = np.repeat(a[:1], size - n, axis=0)
    return jnp.asarray(np.concatenate([a, fill.astype(a.dtype)], axis=0))


def pad_stars(data, size=None):
    """A copy of ``data`` (a FitData) with every per-star array padded to ``size`` stars (default
    :func:`bucket_size`) and ``mask`` (1.0 a real star, 0.0 padding)."""
    n = int(np.shape(data.v)[0])
    size = bucket_size(n) if size is None else int(size)
    if size < n:
        raise ValueError(f"cannot pad {n} stars to {size}")
    new = {}
    for f in dataclasses.fields(data):
        x = getattr(data, f.name)
        if f.name in _GLOBAL_FIELDS or f.name == "mask" or x is None:
            continue
        new[f.name] = _pad(f.name, x, n, size)
    real = np.ones(n) if data.mask is None else np.asarray(data.mask, dtype=float)
    new["mask"] = jnp.asarray(np.concatenate([real, np.zeros(size - n)]))
    return dataclasses.replace(data, **new)
