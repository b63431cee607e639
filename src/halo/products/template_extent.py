"""The extent of a FITS template: the options (half-width, pixel size, draw count, frame) checked
with the command-line flags named in errors, the pixel grid, and the default half-width, the
smallest that holds :data:`HELD_TARGET` of the J of the whole halo.

"The whole halo" is the halo inside its truncation radius r_t: the cone tangent to the sphere of
radius r_t, of half-angle arcsin(r_t / d), at most
:data:`halo.products.jd_draws.WHOLE_HALO_MAX_DEG` (the haloes are untruncated unless a spec sets
r_t, so that cone is the 80 deg one; for NFW what lies beyond is of order (r_s / d)^3 of J)."""

import math
from typing import NamedTuple

import numpy as np

from halo.core.constants import DEG
from halo.core.errors import InputError

__all__ = [
    "TemplateOptions",
    "TemplateGrid",
    "template_grid",
    "check_options",
    "default_pixel",
    "choose_half_width",
    "inscribed_cone_deg",
    "FRAMES",
    "HALF_WIDTHS",
    "HELD_TARGET",
    "MAX_HALF_WIDTH",
    "MAX_SIDE",
    "GRID_PER_EFOLD",
]

#: largest template half-width [deg] (the TAN grid's distortion stays moderate)
MAX_HALF_WIDTH = 30.0
#: largest number of pixels along a side of a template
MAX_SIDE = 2001
#: nodes per e-fold of the angle grid on which dJ/dOmega is computed before interpolation
GRID_PER_EFOLD = 40
#: fraction of the whole halo's J the default map holds at least (its inscribed cone does)
HELD_TARGET = 0.99
#: the half-widths [deg] the default is chosen from (the smallest that holds HELD_TARGET)
HALF_WIDTHS = (1.0, 1.25, 1.5, 2.0, 2.5, 3.0, 3.5, 4.0, 5.0, 6.0, 7.0, 8.0, 10.0, 12.0, 15.0)
HALF_WIDTHS += (20.0, 25.0, 30.0)
#: celestial frames of the templates' WCS
FRAMES = ("icrs", "galactic")


class TemplateOptions(NamedTuple):
    """The template options of an export (None: the default)."""

    n_draws: int = 200
    seed: int = 0
    half_width_deg: float | None = None
    pixel_deg: float | None = None
    frame: str = "icrs"


class TemplateGrid(NamedTuple):
    """The pixel grid of a template and the angles [deg] its radial profile is computed at."""

    n_side: int
    pixel_deg: float
    grid: np.ndarray  # profile angles
    mids: np.ndarray  # their midpoints (to measure the interpolation error)

    @property
    def half_edges(self):
        """Half-width of the map [deg], to the pixel edges."""
        return (self.n_side // 2 + 0.5) * self.pixel_deg


def _number(value, flag):
    if isinstance(value, bool) or not isinstance(value, int | float | np.floating | np.integer):
        raise InputError(f"{flag}: expected a number, got {value!r}")
    return float(value)


def check_options(opts):
    """``opts`` (:class:`TemplateOptions`) checked; errors name the `halo export` flags."""
    n = opts.n_draws
    if isinstance(n, bool) or not isinstance(n, int | np.integer) or n < 1:
        raise InputError(f"--template-draws: must be a whole number of at least 1, got {n!r}")
    frame = str(opts.frame).lower()
    if frame not in FRAMES:
        raise InputError(f"--frame: expected one of {', '.join(FRAMES)}, got {opts.frame!r}")
    half = opts.half_width_deg
    if half is not None:
        half = _number(half, "--half-width-deg")
        if not (math.isfinite(half) and 0.0 < half <= MAX_HALF_WIDTH):
            raise InputError(f"--half-width-deg: must be in (0, {MAX_HALF_WIDTH:g}], got {half:g}")
    pix = opts.pixel_deg
    if pix is not None:
        pix = _number(pix, "--pixel-deg")
        if not (math.isfinite(pix) and pix > 0.0) or (half is not None and pix > half):
            raise InputError(
                f"--pixel-deg: must be positive and at most the half-width, got {pix:g}"
            )
    return opts._replace(n_draws=int(n), half_width_deg=half, pixel_deg=pix, frame=frame)


def default_pixel(half_width_deg):
    """Default pixel side [deg]: 0.01 deg up to a half-width of 2 deg, else half-width / 200."""
    return 0.01 if half_width_deg <= 2.0 else half_width_deg / 200.0


def inscribed_cone_deg(half_width_deg):
    """Half-angle [deg] of the cone inscribed in a TAN square of that half-width: the circle of
    tangent-plane radius h (radians) is the cone arctan(h) (Calabretta & Greisen 2002, A&A 395,
    1077, eq. 54)."""
    return math.atan(half_width_deg * DEG) / DEG


def choose_half_width(j_cones, j_whole, floor_deg):
    """The smallest of :data:`HALF_WIDTHS` (at least ``floor_deg``) whose inscribed cone holds
    :data:`HELD_TARGET` of ``j_whole``; ``j_cones``: J in the inscribed cone of each half-width.
    The largest when none does (the map's header then says how much it holds)."""
    for h, j in zip(HALF_WIDTHS, j_cones, strict=True):
        if h >= floor_deg - 1e-12 and j >= HELD_TARGET * j_whole:
            return h
    return HALF_WIDTHS[-1]


def template_grid(half_width_deg, pixel_deg):
    """The :class:`TemplateGrid` of a map of the given half-width and pixel size."""
    m = math.ceil(half_width_deg / pixel_deg - 0.5 - 1e-9)
    n_side = 2 * m + 1
    if n_side > MAX_SIDE:
        raise InputError(
            f"--half-width-deg {half_width_deg:g} with --pixel-deg {pixel_deg:g} needs "
            f"{n_side} pixels per side (at most {MAX_SIDE}): give a larger --pixel-deg"
        )
    corner = math.atan(math.sqrt(2.0) * (m + 0.5) * pixel_deg * DEG) / DEG
    lo, hi = 0.45 * pixel_deg, 1.02 * corner
    n = max(64, math.ceil(GRID_PER_EFOLD * math.log(hi / lo))) + 1
    ln = np.linspace(math.log(lo), math.log(hi), n)
    return TemplateGrid(n_side, pixel_deg, np.exp(ln), np.exp(0.5 * (ln[1:] + ln[:-1])))
