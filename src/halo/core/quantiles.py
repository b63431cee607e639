"""The quantile summary used everywhere in the outputs (design notes: "Q")."""

import numpy as np

__all__ = ["quantiles"]


def quantiles(x):
    """median, 16/84 and 2.5/97.5 percentiles, mean and std of the finite values of ``x``.

    Returns None when no value is finite.
    """
    x = np.asarray(x, dtype=float).ravel()
    x = x[np.isfinite(x)]
    if x.size == 0:
        return None
    p = np.percentile(x, [50, 16, 84, 2.5, 97.5])
    return {
        "median": float(p[0]),
        "p16": float(p[1]),
        "p84": float(p[2]),
        "p2.5": float(p[3]),
        "p97.5": float(p[4]),
        "mean": float(np.mean(x)),
        "std": float(np.std(x)),
    }
