"""One way to evaluate a function per posterior draw: ``jit(vmap(fn))`` in padded chunks.

Every chunk has the same shape, so the function compiles once: the last chunk is padded by
repeating its last draw and the padding is cut off again. Results come back as numpy arrays.
"""

import jax
import jax.numpy as jnp
import numpy as np

__all__ = ["map_draws"]


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
    batch = max(1, min(int(batch), n))
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
