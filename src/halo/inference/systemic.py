"""Where the systemic-velocity prior is centred: the peak of the velocity distribution of the
stars near the satellite's centre, not the median of the whole catalogue.

A catalogue may hold more field stars than members (e.g. 25 members at 210 km/s among 60 field
stars near 30 km/s): its median then lies in the field, and a prior of +-100 km/s about it misses
the satellite. The members crowd both the centre of the field and a narrow range of velocities, so
the centre used is the densest velocity window among the inner stars:

1. inner stars: those within INNER_RADII half-light radii of the centre (given the angular
   half-light radius), or else the half of the stars nearest the centre; all stars when fewer
   than MIN_INNER are inner;
2. the window of width WINDOW_KMS (wider than the dispersion of any faint satellite, narrower
   than a field population; common practice) that holds the most inner stars, ties going to the
   window whose stars lie closest together;
3. the centre is the median velocity of the inner stars in that window.

With members only it is the peak of their distribution, within a few km/s of the median.
"""

import numpy as np

__all__ = [
    "FG_MEAN_HALF_WIDTH",
    "INNER_RADII",
    "MIN_INNER",
    "V_SYS_HALF_WIDTH",
    "WINDOW_KMS",
    "prior_centres",
    "robust_width",
    "systemic_centre",
]

#: half-width of the uniform v_sys prior about its centre [km/s]
V_SYS_HALF_WIDTH = 100.0
#: the foreground mean's prior reaches this far beyond the median and the v_sys centre [km/s]
FG_MEAN_HALF_WIDTH = 300.0
INNER_RADII = 3.0
MIN_INNER = 5
WINDOW_KMS = 20.0


def _inner(radius, radius_half):
    r = np.asarray(radius, dtype=float)
    if radius_half is not None and radius_half > 0:
        use = r <= INNER_RADII * radius_half
    else:
        use = r <= np.median(r)
    if use.sum() < MIN_INNER:
        use = np.ones_like(r, dtype=bool)
    return use


def systemic_centre(v, radius, radius_half=None):
    """The centre of the systemic-velocity prior [km/s] (see the module notes).

    ``v``: per-star velocities [km/s]; ``radius``: their projected distances from the centre, and
    ``radius_half`` the half-light radius in the same unit (optional).
    """
    v = np.asarray(v, dtype=float)
    x = np.sort(v[_inner(radius, radius_half)])
    if x.size == 0:
        return float(np.median(v))
    hi = np.searchsorted(x, x + WINDOW_KMS, side="right")
    count = hi - np.arange(x.size)
    best = np.flatnonzero(count == count.max())
    spread = x[hi[best] - 1] - x[best]
    k = best[np.argmin(spread)]
    return float(np.median(x[k : hi[k]]))


def robust_width(v, centre, half_width):
    """1.4826 x the median absolute deviation about ``centre`` of the stars within
    ``half_width`` of it (a Gaussian's sigma for members, common practice) [km/s]."""
    v = np.asarray(v, dtype=float)
    near = np.abs(v - centre) <= half_width
    if not near.any():
        return 0.0
    return float(1.4826 * np.median(np.abs(v[near] - centre)))


def prior_centres(satellite, data):
    """(centre of the v_sys prior, (low, high) of the foreground mean's uniform prior) [km/s].

    The centre is the file's ``v_sys_kms`` when given, else :func:`systemic_centre` of the stars
    (``data``: :class:`halo.inference.model.FitData`, circularised angles). The foreground range
    spans FG_MEAN_HALF_WIDTH beyond both the catalogue median and that centre, so that it covers
    the field wherever the satellite lies.
    """
    v = np.asarray(data.v)
    if getattr(satellite, "v_sys_kms", None) is not None:
        centre = float(satellite.v_sys_kms)
    else:
        theta_half = np.arctan(satellite.r_half_circ_kpc / satellite.distance_kpc)
        centre = systemic_centre(v, np.asarray(data.theta), theta_half)
    med = float(np.median(v))
    return centre, (min(med, centre) - FG_MEAN_HALF_WIDTH, max(med, centre) + FG_MEAN_HALF_WIDTH)
