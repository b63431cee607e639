"""Field (foreground) stars mixed into a mock: uniform over a disc about the centre, broad
velocities, measured at the same epochs as the members."""

import astropy.units as u
import numpy as np
from astropy.table import Table, vstack

from halo.mock.binaries_epochs import epoch_rows, repeat_mask
from halo.mock.sky import sky_coordinates

__all__ = ["DEFAULT_FOREGROUND", "field_stars", "with_foreground"]

#: (offset from v_sys, sigma, weight) [km/s] of the field's velocity components: a broad
#: two-component stand-in for a Galactic field (common practice)
DEFAULT_FOREGROUND = ((50.0, 40.0, 0.6), (-30.0, 90.0, 0.4))


def _field_radius_kpc(sat, field_radius_pc):
    """Radius of the field disc [kpc]: 5 major-axis half-light radii unless given [pc]."""
    return (5.0 * sat.r_half_pc if field_radius_pc is None else float(field_radius_pc)) * 1e-3


def _field_sky(sat, n, r_max, rng):
    """RA, Dec [deg] of ``n`` stars uniform over a disc of radius ``r_max`` [kpc]."""
    rad = r_max * np.sqrt(rng.uniform(size=n))
    phi = rng.uniform(0.0, 2 * np.pi, n)
    return sky_coordinates(
        rad * np.sin(phi), rad * np.cos(phi), sat.ra_deg, sat.dec_deg, sat.distance_kpc
    )


def field_stars(
    sat,
    n,
    rng,
    *,
    field_radius_pc,
    components,
    v_sys,
    error_range,
    epochs_mjd,
    repeat_fraction,
    id0,
):
    """Non-member rows (ids from ``id0``), with ``meta`` holding the field radius [pc] and the
    velocity components used."""
    r_max = _field_radius_kpc(sat, field_radius_pc)
    comp = np.asarray(DEFAULT_FOREGROUND if components is None else components, dtype=float)
    ra, dec = _field_sky(sat, n, r_max, rng)
    k = rng.choice(len(comp), size=n, p=comp[:, 2] / comp[:, 2].sum())
    v_true = v_sys + comp[k, 0] + comp[k, 1] * rng.standard_normal(n)
    _, star, mjd = epoch_rows(n, epochs_mjd)
    keep = np.ones(star.size, dtype=bool)
    if mjd is not None and repeat_fraction < 1:
        keep = repeat_mask(rng, n, star, np.arange(star.size) < n, repeat_fraction)
    star = star[keep]
    err = rng.uniform(error_range[0], error_range[1], star.size)
    t = Table()
    t["id"] = star + id0
    t["ra"] = u.Quantity(ra[star], u.deg)
    t["dec"] = u.Quantity(dec[star], u.deg)
    t["vlos"] = u.Quantity(v_true[star] + err * rng.standard_normal(star.size), u.km / u.s)
    t["vlos_err"] = u.Quantity(err, u.km / u.s)
    if mjd is not None:
        t["mjd"] = mjd[keep]
    t.meta["field_radius_pc"] = r_max * 1e3
    t.meta["components"] = [[float(x) for x in c] for c in comp]
    return t


def with_foreground(table, truth, sat, n, rng, **options):
    """``table`` with ``n`` field stars appended (:func:`field_stars` ``options``); records them
    in ``truth`` (n_foreground, foreground_ids, field_radius_pc, foreground_components)."""
    fg = field_stars(sat, n, rng, **options)
    truth["n_foreground"] = n
    truth["foreground_ids"] = [int(i) for i in np.unique(fg["id"])]
    truth["field_radius_pc"] = float(fg.meta["field_radius_pc"])
    truth["foreground_components"] = fg.meta["components"]
    fg.meta.clear()
    return vstack([table, fg])
