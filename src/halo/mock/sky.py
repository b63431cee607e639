"""Mock stars placed on the sky: the area-preserving elliptical stretch and the inverse gnomonic
projection of tangent-plane offsets.
"""

import math

import astropy.units as u
import numpy as np
from astropy.coordinates import SkyCoord

__all__ = ["sky_coordinates", "ellipse_offsets"]


def sky_coordinates(xi_kpc, eta_kpc, ra_deg, dec_deg, distance_kpc):
    """RA and Dec [deg] of tangent-plane offsets (east ``xi``, north ``eta``) [kpc] at a distance.

    Standard coordinates (xi, eta) / distance [rad] are placed on the sky by the inverse gnomonic
    projection: separation arctan(rho) from the centre at position angle atan2(xi, eta) east of
    north (Calabretta & Greisen 2002, A&A 395, 1077, sec. 5.1.3), done with astropy's
    ``SkyCoord.directional_offset_by``.
    """
    centre = SkyCoord(ra=ra_deg * u.deg, dec=dec_deg * u.deg, frame="icrs")
    xi = np.asarray(xi_kpc, dtype=float) / distance_kpc
    eta = np.asarray(eta_kpc, dtype=float) / distance_kpc
    coords = centre.directional_offset_by(
        np.arctan2(xi, eta) * u.rad, np.arctan(np.hypot(xi, eta)) * u.rad
    )
    return coords.ra.deg, coords.dec.deg


def ellipse_offsets(x, y, ellipticity, pa_deg):
    """(xi, eta) [same unit as x, y]: stretch x to the major axis by 1/sqrt(q), y by sqrt(q),
    q = 1 - e (area preserving), then rotate the major axis to PA east of north."""
    q = 1.0 - ellipticity
    a_maj, b_min = x / math.sqrt(q), y * math.sqrt(q)
    pa = math.radians(pa_deg)
    xi = a_maj * math.sin(pa) + b_min * math.cos(pa)
    eta = a_maj * math.cos(pa) - b_min * math.sin(pa)
    return xi, eta
