"""One way to evaluate a function per posterior draw: ``jit(vmap(fn))`` in padded chunks.

Every chunk has the same shape, so the function compiles once: the last chunk is padded by
repeating its last draw and the padding is cut off again. Fewer draws than a chunk are padded up
to the next power of two (:func:`chunk_size`), so that a run of 300 draws and one of 320 share a
program. Results come back as numpy arrays.
"""

import jax
import jax.numpy as jnp
import numpy as np

__all__ = ["map_draws", "chunk_size"]

#: the smallest chunk: fewer draws than this are padded up to it
MIN_CHUNK = 64


def chunk_size(n, batch=1000):
    """Draws per compiled call for ``n`` draws: ``batch``, or for fewer draws the next power of two
    (at least ``MIN_CHUNK``), so that runs with similar numbers of draws (300 or 320, a thinned
    posterior of 99) share one compiled program instead of compiling one per count."""
    batch = max(1, int(batch))
    if n >= batch:
        return batch
    return min(batch, max(MIN_CHUNK, 1 << max(0, int(n) - 1).bit_length()))


def map_draws(fn, *args, batch=1000, on_chunk=None, compiled=None):
    """``fn`` applied to every draw: ``fn(*args[i])`` for i along the leading axis of each leaf.

    Parameters
    ----------
    fn : function of one draw (pytrees of scalars or arrays); traced once by jit(vmap(fn))
    *args : pytrees whose leaves all have the same leading length n (the draws)
    batch : draws per compiled call (memory only; results do not depend on it)
    on_chunk : optional callable(k) told how many draws each finished chunk held (progress)
    compiled : an already jitted vmap of ``fn`` to reuse (optional)

    Returns a pytree like fn's output with numpy leaves of leading length n.
    """
    leaves = jax.tree_util.tree_leaves(args)
    if not leaves:
        raise ValueError("map_draws needs at least one array argument")
    n = int(np.shape(leaves[0])[0])
    if n == 0:
        raise ValueError("map_draws needs at least one draw")
    batch = chunk_size(n, batch)
    run = compiled if compiled is not None else jax.jit(jax.vmap(fn))
    chunks = []
    for k in range(0, n, batch):
        idx = np.minimum(np.arange(k, k + batch), n - 1)
        part = jax.tree_util.tree_map(lambda a, i=idx: jnp.asarray(np.asarray(a)[i]), args)
        keep = min(batch, n - k)
        out = run(*part)
        chunks.append(jax.tree_util.tree_map(lambda a, m=keep: np.asarray(a)[:m], out))
        if on_chunk is not None:
            on_chunk(keep)
    return jax.tree_util.tree_map(lambda *c: np.concatenate(c, axis=0), *chunks)
