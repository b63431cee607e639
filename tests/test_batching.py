"""Per-draw evaluation in padded chunks (halo.core.batching.map_draws), the way derived quantities,
evidence, star probabilities and J/D tables run over a posterior."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest

from halo.core.batching import MIN_CHUNK, chunk_size, map_draws


def _fn(p):
    return {"a": jnp.sin(p["x"]) * jnp.sum(p["v"]), "b": p["v"] ** 2}


@pytest.mark.parametrize("n", [1, 5, 63, 64, 65, 300, 999, 1000, 1001, 2500])
def test_every_draw_equals_its_own_evaluation(n):
    rng = np.random.default_rng(n)
    draws = {"x": rng.normal(size=n), "v": rng.normal(size=(n, 3))}
    out = map_draws(_fn, draws)
    # reference: the function on each draw alone, in numpy (common practice)
    ref_a = np.sin(draws["x"]) * draws["v"].sum(axis=1)
    assert out["a"].shape == (n,) and out["b"].shape == (n, 3)
    np.testing.assert_allclose(out["a"], ref_a, rtol=1e-13, atol=1e-15)
    np.testing.assert_allclose(out["b"], draws["v"] ** 2, rtol=1e-15)


def test_chunk_sizes():
    assert chunk_size(1) == MIN_CHUNK == 64
    assert chunk_size(64) == 64 and chunk_size(65) == 128
    assert chunk_size(300) == chunk_size(320) == chunk_size(512) == 512
    assert chunk_size(600) == chunk_size(5000) == 1000
    assert chunk_size(300, batch=256) == 256


def test_similar_draw_counts_share_one_program():
    traced = []

    def fn(x):
        traced.append(x.shape)
        return 2.0 * x

    run = jax.jit(jax.vmap(fn))
    for n in (300, 320, 400, 99 * 5):
        map_draws(fn, np.arange(float(n)), compiled=run)
    assert traced == [()], traced  # one trace (one chunk shape, 512) for all four counts
    on = []
    map_draws(fn, np.arange(1500.0), on_chunk=on.append)
    assert on == [1000, 500]
