"""Fixed-size blocks: the mock's numpy arrays passed through jitted JAX kernels.

Each kernel sees blocks of :data:`BLOCK` radii, so it compiles once per model structure whatever
the number of stars or grid nodes. Not :func:`halo.core.batching.map_draws`: that one vmaps a
function of one draw, whereas these kernels take whole arrays (vectorised over the block), and
per-element vmapping changes the velocities in their last bits.
"""

import jax
import jax.numpy as jnp
import numpy as np

__all__ = ["BLOCK", "blockwise", "mass_and_density"]

#: radii per block handed to a jitted kernel
BLOCK = 1024


def blockwise(fn, args, *arrays):
    """fn(*args, *blocks) over fixed-size blocks of the flattened ``arrays`` (numpy results).

    The arrays share a shape; the last block is padded with copies of the last element. ``fn``
    returns an array or a tuple of arrays with the block's shape.
    """
    arrays = [np.asarray(a, dtype=float) for a in arrays]
    shape = arrays[0].shape
    flat = [a.ravel() for a in arrays]
    n = flat[0].size
    m = max(-(-n // BLOCK), 1) * BLOCK
    flat = [np.concatenate([f, np.full(m - n, f[-1] if n else 1.0)]) for f in flat]
    parts = [fn(*args, *(jnp.asarray(f[i : i + BLOCK]) for f in flat)) for i in range(0, m, BLOCK)]
    if isinstance(parts[0], tuple):
        return tuple(
            np.concatenate([np.asarray(p[k]) for p in parts])[:n].reshape(shape)
            for k in range(len(parts[0]))
        )
    return np.concatenate([np.asarray(p) for p in parts])[:n].reshape(shape)


@jax.jit
def mass_and_density(mass_model, r):
    """(M(<r) [Msun], rho(r) [Msun kpc^-3]) of a mass model at radii r [kpc]."""
    return mass_model.mass(r), mass_model.density(r)
