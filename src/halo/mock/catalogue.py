"""Mock velocity catalogues with a known truth (validation, the demo satellite, ``halo mock``).

Stars are drawn in three steps, all with a seeded ``numpy.random.Generator``:

1. 3D positions from the light profile (:func:`sample_positions`: inverse of the enclosed light
   fraction, isotropic directions; the line of sight is the z axis).
2. Velocities, by one of two methods:

   - ``"df"`` (equilibrium, exact): the distribution function of the tracer in the total potential
     (dark halo + stars) by Eddington inversion, isotropic or Osipkov-Merritt
     (:func:`distribution_function`), then speeds by rejection sampling from f(Q) times the
     phase-space volume at the star's radius (:func:`sample_velocities_df`). Independent of the
     Jeans solver, so a mock made this way is a non-circular check of it.
   - ``"gaussian"`` (approximate, any anisotropy): v_r ~ N(0, sigma_r(r)) and each tangential
     component ~ N(0, sigma_r sqrt(1 - beta(r))) with sigma_r from :func:`halo.physics.jeans.sigma_r`
     (:func:`sample_velocities_gaussian`). The second moments are right; the velocity distribution
     is not an equilibrium one.

3. Sky positions: the projected (x, y) of the spherical model, stretched along the major axis by
   1/sqrt(1 - e) and squeezed along the minor one by sqrt(1 - e) (area preserving, so the
   circularised radius is the spherical model's projected radius and the elliptical radius follows
   the light profile with the major-axis half-light radius), rotated to the position angle (east of
   north), divided by the distance (tangent-plane standard coordinates) and placed on the sky by the
   inverse gnomonic projection (:func:`sky_coordinates`).

:func:`make_mock` ties these together and returns the catalogue (columns ``id, ra, dec, vlos,
vlos_err`` and ``mjd`` with several epochs) with a ``truth`` dictionary.

The DF and the samplers are numpy/scipy code (float64), not traced JAX: mocks are made once, outside
any fit. The model's profiles are still the project's JAX functions (the derivatives of the tracer
density come from JAX's automatic differentiation).
"""

import dataclasses
import functools
import math
from typing import NamedTuple

import astropy.units as u
import jax
import jax.numpy as jnp
import numpy as np
from astropy.coordinates import SkyCoord
from astropy.table import Table, vstack
from scipy.interpolate import PchipInterpolator

from halo.core.constants import G
from halo.core.errors import InputError
from halo.inputs.satellite import Satellite, parse_satellite
from halo.physics.anisotropy import ANISOTROPIES, Constant, OsipkovMerritt
from halo.physics.dark import DARK_PROFILES
from halo.physics.jeans import sigma_r as _jeans_sigma_r
from halo.physics.light import LIGHT_PROFILES
from halo.physics.mass import MassModel, Stars

__all__ = [
    "Positions",
    "sample_positions",
    "DistributionFunction",
    "distribution_function",
    "Velocities",
    "sample_velocities_df",
    "sample_velocities_gaussian",
    "line_of_sight_velocity",
    "sky_coordinates",
    "MockCatalogue",
    "make_mock",
]

_LN10 = math.log(10.0)

#: radii are passed to jitted JAX kernels in blocks of this size, so each kernel compiles once per
#: model structure whatever the number of stars or grid nodes
_BLOCK = 1024


def _blockwise(fn, args, *arrays):
    """fn(*args, *blocks) over fixed-size blocks of the flattened ``arrays`` (numpy results).

    The arrays share a shape; the last block is padded with copies of the last element. ``fn``
    returns an array or a tuple of arrays with the block's shape.
    """
    arrays = [np.asarray(a, dtype=float) for a in arrays]
    shape = arrays[0].shape
    flat = [a.ravel() for a in arrays]
    n = flat[0].size
    m = max(-(-n // _BLOCK), 1) * _BLOCK
    flat = [np.concatenate([f, np.full(m - n, f[-1] if n else 1.0)]) for f in flat]
    parts = [
        fn(*args, *(jnp.asarray(f[i : i + _BLOCK]) for f in flat)) for i in range(0, m, _BLOCK)
    ]
    if isinstance(parts[0], tuple):
        return tuple(
            np.concatenate([np.asarray(p[k]) for p in parts])[:n].reshape(shape)
            for k in range(len(parts[0]))
        )
    return np.concatenate([np.asarray(p) for p in parts])[:n].reshape(shape)


# ----------------------------------------------------------------------------------- positions


class Positions(NamedTuple):
    """Star positions [kpc] relative to the centre; z is along the line of sight."""

    x: np.ndarray
    y: np.ndarray
    z: np.ndarray
    r: np.ndarray  #: 3D radius
    R: np.ndarray  #: projected radius sqrt(x^2 + y^2)


@functools.partial(jax.jit, static_argnames=("n_iter",))
def _invert_enclosed(light, ln_lo, ln_hi, target, n_iter):
    """ln r with enclosed_3d(r) = target, by ``n_iter`` bisections of [ln_lo, ln_hi]."""

    def body(_, bracket):
        lo, hi = bracket
        mid = 0.5 * (lo + hi)
        above = light.enclosed_3d(jnp.exp(mid)) > target
        return jnp.where(above, lo, mid), jnp.where(above, mid, hi)

    lo, hi = jax.lax.fori_loop(0, n_iter, body, (ln_lo, ln_hi))
    return 0.5 * (lo + hi)


def sample_positions(light, n, rng, *, lo_dex=-6.0, hi_dex=6.0, n_grid=512, n_bisect=44):
    """Draw ``n`` stars from a unit-normalised light profile (spherical, isotropic directions).

    Parameters
    ----------
    light : a light profile from :mod:`halo.physics.light`
    n : number of stars
    rng : numpy.random.Generator
    lo_dex, hi_dex : radii are drawn between 10**lo_dex and 10**hi_dex projected half-light radii
        (and inside the profile's edge); the light outside (1e-12 of it for a Plummer profile with
        the defaults) is put at those limits
    n_grid : log-spaced radii used to bracket each star's radius
    n_bisect : bisection steps inside the bracket (width / 2**n_bisect: ~1e-15 in ln r)

    Returns
    -------
    :class:`Positions` [kpc]

    Notes
    -----
    r = L^-1(U) with U uniform and L(<r) the enclosed light fraction (inverse transform sampling,
    common practice), solved by bracketing on a log grid then bisection; cos(theta) uniform in
    [-1, 1] and phi uniform in [0, 2 pi) give isotropic directions.
    """
    r_e = float(light.r_half_2d())
    ln_top = min(math.log(r_e) + hi_dex * _LN10, math.log(float(light.r_edge())))
    ln_grid = np.linspace(math.log(r_e) + lo_dex * _LN10, ln_top, n_grid)
    frac = np.maximum.accumulate(np.asarray(light.enclosed_3d(jnp.exp(ln_grid))))
    target = np.clip(rng.uniform(size=n), frac[0], frac[-1])
    k = np.clip(np.searchsorted(frac, target), 1, n_grid - 1)
    invert = functools.partial(_invert_enclosed, n_iter=n_bisect)
    r = np.exp(_blockwise(invert, (light,), ln_grid[k - 1], ln_grid[k], target))
    cos_t = rng.uniform(-1.0, 1.0, size=n)
    phi = rng.uniform(0.0, 2.0 * np.pi, size=n)
    sin_t = np.sqrt(1.0 - cos_t**2)
    x, y, z = r * sin_t * np.cos(phi), r * sin_t * np.sin(phi), r * cos_t
    return Positions(x=x, y=y, z=z, r=r, R=np.hypot(x, y))


# -------------------------------------------------------------------------- distribution function


@jax.jit
def _tracer_terms(mass_model, light, inv_ra2, r):
    """nu_Q, h = d nu_Q / d Psi and h2 = d^2 nu_Q / d Psi^2 at radii r (automatic differentiation).

    nu_Q = (1 + r^2 / r_a^2) nu; d Psi / dr = -G M / r^2, so h = -nu_Q'(r) r^2 / (G M) and
    h2 = -h'(r) r^2 / (G M).
    """

    def nu_q(s):
        return (1.0 + inv_ra2 * s**2) * light.density(s)

    def h(s):
        return -jax.grad(nu_q)(s) * s**2 / (G * mass_model.mass(s))

    def h2(s):
        return -jax.grad(h)(s) * s**2 / (G * mass_model.mass(s))

    return jax.vmap(nu_q)(r), jax.vmap(h)(r), jax.vmap(h2)(r)


@jax.jit
def _mass_and_density(mass_model, r):
    return mass_model.mass(r), mass_model.density(r)


def _gauss_legendre01(n):
    t, w = np.polynomial.legendre.leggauss(n)
    return 0.5 * (t + 1.0), 0.5 * w


def _potential(mass_model, ln_r, n_panel, outer_dex, n_outer):
    """Depth D_k = Psi(0) - Psi(r_k), panel drops Psi(r_k) - Psi(r_k+1) and Psi(0) [(km/s)^2].

    dPsi/d ln r = -G M / r, integrated by ``n_panel``-point Gauss-Legendre per grid panel in ln r.
    Below r_0 the mass is a power law M ~ r^p (p = 4 pi r^3 rho / M at r_0): Psi(0) - Psi(r_0) =
    G M(r_0) / (r_0 (p - 1)). Beyond the grid, panels in ln r out to 10**outer_dex r_top and a
    power-law tail G M / (r (1 - p)) there.
    """
    t, w = _gauss_legendre01(n_panel)
    h = np.diff(ln_r)
    nodes = ln_r[:-1, None] + h[:, None] * t[None, :]
    m, _ = _blockwise(_mass_and_density, (mass_model,), np.exp(nodes))
    drops = h * np.sum(w * G * m / np.exp(nodes), axis=1)
    # inside the grid
    m0, rho0 = (float(v) for v in _blockwise(_mass_and_density, (mass_model,), math.exp(ln_r[0])))
    r0 = math.exp(ln_r[0])
    p0 = 4.0 * math.pi * r0**3 * rho0 / m0
    if not p0 > 1.05:
        raise InputError(
            "distribution function: the central potential of this mass model diverges "
            f"(M ~ r^{p0:.2f} at the centre); use method='gaussian'"
        )
    depth0 = G * m0 / (r0 * (p0 - 1.0))
    # beyond the grid
    ln_out = np.linspace(ln_r[-1], ln_r[-1] + outer_dex * _LN10, n_outer + 1)
    ho = np.diff(ln_out)
    nodes = ln_out[:-1, None] + ho[:, None] * t[None, :]
    m, _ = _blockwise(_mass_and_density, (mass_model,), np.exp(nodes))
    outer = float(np.sum(ho[:, None] * w * G * m / np.exp(nodes)))
    r_far = math.exp(ln_out[-1])
    m_far, rho_far = (float(v) for v in _blockwise(_mass_and_density, (mass_model,), r_far))
    p_far = 4.0 * math.pi * r_far**3 * rho_far / m_far
    if not p_far < 0.95:
        raise InputError(
            "distribution function: the mass model's potential does not converge at large radii"
        )
    psi_top = outer + G * m_far / (r_far * (1.0 - p_far))
    depth = depth0 + np.concatenate([[0.0], np.cumsum(drops)])
    psi_c = depth[-1] + psi_top
    return depth, drops, psi_c


@dataclasses.dataclass(frozen=True, eq=False)
class DistributionFunction:
    """Isotropic (``r_a = inf``) or Osipkov-Merritt distribution function of a tracer, tabulated.

    Built by :func:`distribution_function`; f(Q) with Q = E - L^2 / (2 r_a^2) the Osipkov-Merritt
    variable (Q = E, the relative energy, when isotropic), per unit tracer (the tracer density is
    unit-normalised, so Int f d^3x d^3v = 1).

    Attributes
    ----------
    ln_r : evenly spaced grid of ln r [r in kpc]; node k carries Q_k = Psi(r_k)
    psi : relative potential Psi(r_k) = -Phi(r_k) [(km/s)^2], Psi(inf) = 0
    depth : Psi(0) - Psi(r_k) [(km/s)^2] (same information, accurate near the centre)
    slope : d depth / d ln r = G M(r_k) / r_k [(km/s)^2]
    f : f(Q_k) [kpc^-3 (km/s)^-3]
    r_a : anisotropy radius [kpc] (inf: isotropic)
    rtol_negative : f below -rtol_negative * max(f) counts as negative
    """

    ln_r: np.ndarray
    psi: np.ndarray
    depth: np.ndarray
    slope: np.ndarray
    f: np.ndarray
    r_a: float
    rtol_negative: float = 1e-6

    @property
    def psi_centre(self):
        """Psi(0) [(km/s)^2]."""
        return float(self.psi[0] + self.depth[0])

    @property
    def is_physical(self):
        """False when f < 0 somewhere (beyond ``rtol_negative``): no such equilibrium exists."""
        return bool(self.f.min() >= -self.rtol_negative * self.f.max())

    @functools.cached_property
    def _interpolants(self):
        # ln r of the node where Psi = Q: from ln(depth) near the centre, from ln(psi) outside
        inner = PchipInterpolator(np.log(self.depth), self.ln_r)
        outer = PchipInterpolator(np.log(self.psi[::-1]), self.ln_r[::-1])
        # f along the grid; PCHIP is monotone between nodes, so it never exceeds its node values
        raw = PchipInterpolator(self.ln_r, self.f)
        clipped = PchipInterpolator(self.ln_r, np.maximum(self.f, 0.0))
        return inner, outer, raw, clipped

    def ln_r_of(self, q, depth_q=None):
        """ln of the radius [kpc] where Psi = Q, for Q in [Psi(r_top), Psi(r_0)] (clamped).

        ``depth_q`` = Psi(0) - Q may be given instead of recomputing it (accurate near the centre).
        """
        inner, outer, _, _ = self._interpolants
        q = np.asarray(q, dtype=float)
        d = self.psi_centre - q if depth_q is None else np.asarray(depth_q, dtype=float)
        x_in = inner(np.log(np.clip(d, self.depth[0], self.depth[-1])))
        x_out = outer(np.log(np.clip(q, self.psi[-1], self.psi[0])))
        return np.clip(np.where(d < q, x_in, x_out), self.ln_r[0], self.ln_r[-1])

    def __call__(self, q, depth_q=None, *, clip_negative=False):
        """f(Q) [kpc^-3 (km/s)^-3]; 0 below Psi(r_top), f(Psi(r_0)) above Psi(r_0).

        PCHIP interpolation in ln r between the nodes; between Psi(10^-2 R_e) and Psi(10^2 R_e)
        it adds no visible error to that of the nodes (measured for the Plummer sphere).
        """
        interp = self._interpolants[3 if clip_negative else 2]
        q = np.asarray(q, dtype=float)
        return np.where(q < self.psi[-1], 0.0, interp(self.ln_r_of(q, depth_q)))

    def potential(self, r):
        """(Psi(r), Psi(0) - Psi(r)) [(km/s)^2] at radii r [kpc] (clamped to the grid).

        Cubic Hermite interpolation in ln r with the exact slope G M / r at the nodes (error
        O(h^4) in the grid step h).
        """
        ln_r = np.clip(np.log(np.asarray(r, dtype=float)), self.ln_r[0], self.ln_r[-1])
        h = self.ln_r[1] - self.ln_r[0]
        k = np.clip(((ln_r - self.ln_r[0]) / h).astype(int), 0, len(self.ln_r) - 2)
        s = np.clip((ln_r - self.ln_r[k]) / h, 0.0, 1.0)
        m0, m1 = self.slope[k] * h, self.slope[k + 1] * h
        step = self.depth[k + 1] - self.depth[k]
        inc = (3 * s**2 - 2 * s**3) * step + (s**3 - 2 * s**2 + s) * m0 + (s**3 - s**2) * m1
        return self.psi[k] - inc, self.depth[k] + inc


def _product_integral(depth, drops, h2, js):
    """Sum over panels i >= j of Int h2 dPsi / sqrt(Psi_j - Psi), h2 linear in Psi on each panel.

    With s = sqrt(Psi_j - Psi) the panel integral is exactly
    (s1 - s0) [2 h2_i + (2/3)(h2_i+1 - h2_i)(s1 + 2 s0) / (s0 + s1)], s1 - s0 = drop_i / (s0 + s1).
    """
    w = depth[None, :] - depth[js, None]
    live = np.arange(len(drops))[None, :] >= js[:, None]
    s = np.sqrt(np.maximum(w, 0.0))
    s0, s1 = s[:, :-1], s[:, 1:]
    den = np.where(live, s0 + s1, 1.0)
    ds = drops[None, :] / den
    term = ds * (2.0 * h2[None, :-1] + (2.0 / 3.0) * np.diff(h2)[None, :] * (s1 + 2.0 * s0) / den)
    return np.sum(np.where(live, term, 0.0), axis=1)


def distribution_function(
    mass_model,
    light,
    anisotropy=None,
    *,
    n_grid=2000,
    lo_dex=-4.0,
    hi_dex=4.0,
    n_panel=4,
    outer_dex=6.0,
    n_outer=400,
    chunk=256,
):
    """Eddington (isotropic) or Osipkov-Merritt distribution function of a tracer in a potential.

    Parameters
    ----------
    mass_model : anything with ``mass(r)`` [Msun] and ``density(r)`` [Msun kpc^-3], the total mass
        generating the potential (e.g. :class:`halo.physics.mass.MassModel` of a dark halo and the stars)
    light : the tracer, a unit-normalised light profile from :mod:`halo.physics.light`
    anisotropy : None or ``Constant(0)`` (isotropic) or ``OsipkovMerritt(r_a)``
    n_grid : log-spaced grid radii from 10**lo_dex to 10**hi_dex projected half-light radii
        (capped at the profile's edge)
    n_panel : Gauss-Legendre nodes per grid panel of the potential integral
    outer_dex, n_outer : the potential beyond the grid, integrated over ``outer_dex`` more decades
        in ``n_outer`` panels, then a power-law tail
    chunk : rows of the N x N product-integration table handled at once (memory only)

    Returns
    -------
    :class:`DistributionFunction`

    Notes
    -----
    f(Q) = 1 / (sqrt(8) pi^2) d/dQ Int_0^Q (d nu_Q / d Psi) dPsi / sqrt(Q - Psi)
         = 1 / (sqrt(8) pi^2) [Int_0^Q (d^2 nu_Q / d Psi^2) dPsi / sqrt(Q - Psi)
                               + (d nu_Q / d Psi)_(Psi=0) / sqrt(Q)],
    nu_Q = (1 + r^2 / r_a^2) nu(r) (nu_Q = nu when isotropic), Psi the relative potential of the
    total mass (Binney & Tremaine 2008, eqs. 4.46 and 4.67; Osipkov 1979; Merritt 1985).
    The derivatives with respect to Psi are taken along r by JAX's automatic differentiation
    (d Psi / dr = -G M / r^2). The integral is done on the grid nodes Q_j = Psi(r_j) by product
    integration: d^2 nu_Q / d Psi^2 linear in Psi on each panel and the 1/sqrt(Q - Psi) weight
    integrated exactly, so the singular end point costs no accuracy. The part below Psi(r_top) is
    the boundary term with d nu_Q / d Psi at r_top and weight 1 / sqrt(Q) (negligible for tracers
    that fall faster than the potential). Differences Q_j - Psi are taken from the depth below the
    centre, Psi(0) - Psi, which keeps them accurate deep in the potential.

    Accuracy (tests/test_mock.py, defaults): relative error of f 4e-5 against the self-consistent
    Plummer f(E) ~ E^(7/2) (for Q = Psi(r), r from 10^-2 to 10^2 R_e), 8e-5 against the Hernquist
    (1990) closed form (r from 10^-3 to 10^3 a), 1e-5 of max f against the Osipkov-Merritt Plummer
    f(Q); the error falls as n_grid^-2 (6e-4, 1.6e-4, 4e-5 at 500, 1000, 2000 nodes). The
    potential's relative error is ~1e-11.

    Not every model has a non-negative f: Osipkov-Merritt Plummer spheres need r_a >= 3a/4, and a
    cored tracer (Plummer, King) in a cusped potential (NFW) has f < 0 at the most bound energies
    when isotropic. :attr:`DistributionFunction.is_physical` flags this.

    References
    ----------
    Eddington A. S. 1916, MNRAS 76, 572; Osipkov L. P. 1979, Pis'ma Astron. Zh. 5, 77;
    Merritt D. 1985, AJ 90, 1027; Binney J. & Tremaine S. 2008, Galactic Dynamics, 2nd ed.,
    sec. 4.3.
    """
    if anisotropy is None or (isinstance(anisotropy, Constant) and float(anisotropy.value) == 0.0):
        r_a = math.inf
    elif isinstance(anisotropy, OsipkovMerritt):
        r_a = float(anisotropy.r_a)
    else:
        raise InputError(
            "distribution function: only isotropic and Osipkov-Merritt anisotropy are supported "
            f"(got {type(anisotropy).__name__}); use method='gaussian'"
        )
    r_e = float(light.r_half_2d())
    ln_top = min(math.log(r_e) + hi_dex * _LN10, math.log(float(light.r_edge())))
    ln_r = np.linspace(math.log(r_e) + lo_dex * _LN10, ln_top, n_grid)
    depth, drops, psi_c = _potential(mass_model, ln_r, n_panel, outer_dex, n_outer)
    psi = psi_c - depth
    inv_ra2 = 0.0 if math.isinf(r_a) else 1.0 / r_a**2
    _, h, h2 = _blockwise(_tracer_terms, (mass_model, light, inv_ra2), np.exp(ln_r))
    integral = np.concatenate(
        [
            _product_integral(depth, drops, h2, np.arange(j, min(j + chunk, n_grid)))
            for j in range(0, n_grid, chunk)
        ]
    )
    f = (integral + h[-1] / np.sqrt(psi)) / (math.sqrt(8.0) * math.pi**2)
    m_nodes = _blockwise(_mass_and_density, (mass_model,), np.exp(ln_r))[0]
    slope = G * m_nodes / np.exp(ln_r)
    return DistributionFunction(ln_r=ln_r, psi=psi, depth=depth, slope=slope, f=f, r_a=r_a)


# ------------------------------------------------------------------------------------- velocities


class Velocities(NamedTuple):
    """Velocity components [km/s] at each star along r-hat, theta-hat and phi-hat."""

    v_r: np.ndarray
    v_theta: np.ndarray
    v_phi: np.ndarray


def _envelope_bins(n_nodes, n_env):
    """Node indices of the envelope bin edges (bin b spans nodes edges[b] .. edges[b+1])."""
    return np.unique(np.linspace(0, n_nodes - 1, n_env + 1).round().astype(int))


def sample_velocities_df(df, r, rng, *, n_env=128, max_rounds=10_000, allow_unphysical=False):
    """Velocities drawn from a tabulated distribution function at 3D radii ``r`` [kpc].

    Parameters
    ----------
    df : :class:`DistributionFunction` (isotropic or Osipkov-Merritt); must be physical
    r : 3D radii of the stars [kpc] (drawn from the same tracer, e.g. by :func:`sample_positions`)
    rng : numpy.random.Generator
    n_env : number of bins of the piecewise-constant rejection envelope
    max_rounds : give up (RuntimeError) after this many rejection rounds
    allow_unphysical : when the DF is negative somewhere, sample from max(f, 0) instead of raising
        (the result is then not an equilibrium: use only to explore)

    Returns
    -------
    :class:`Velocities` [km/s]

    Notes
    -----
    At fixed r, write w = (v_r, sqrt(1 + r^2/r_a^2) v_t) so that Q = Psi(r) - |w|^2 / 2; the
    velocity density f(Q) d^3v is isotropic in w (Osipkov 1979; Merritt 1985). Its modulus has
    density ~ w^2 f(Q) dw, i.e. ~ sqrt(Psi - Q) f(Q) dQ for Q in [0, Psi(r)] (phase-space volume
    times the DF). Q is drawn by rejection (common practice): the proposal is sqrt(Psi - Q) times a
    piecewise-constant bound of f on ``n_env`` bins of the Q grid (the largest node value in each
    bin, a true bound since the interpolant is monotone between nodes), accepted with probability
    f(Q) / bound. Exact for the tabulated f. Orbits bound beyond the grid's outer radius
    (Q < Psi(r_top)) are not drawn, stars outside the grid are given the potential of its nearest
    end, and a star with no allowed orbit (f = 0 for every Q <= Psi(r), e.g. at a truncated
    tracer's edge) is left at rest; all this concerns a negligible fraction of the light with the
    default grids.
    """
    if not (df.is_physical or allow_unphysical):
        raise InputError(
            "the distribution function of this model is negative somewhere: no such equilibrium "
            "exists (e.g. Osipkov-Merritt r_a too small, or a cored tracer with isotropic orbits "
            "in a cusped halo); use method='gaussian' or change the model"
        )
    r = np.asarray(r, dtype=float)
    n = r.size
    psi_s, depth_s = df.potential(r)
    edges = _envelope_bins(len(df.f), n_env)
    f_pos = np.maximum(df.f, 0.0)
    bound = np.array([f_pos[a : b + 1].max() for a, b in zip(edges[:-1], edges[1:], strict=True)])
    d_hi_q, d_lo_q = df.depth[edges[:-1]], df.depth[edges[1:]]  # bin b: Q from Psi_lo to Psi_hi
    half_w2 = np.empty(n)
    pending = np.arange(n)
    for _ in range(max_rounds):
        if pending.size == 0:
            break
        ds = depth_s[pending, None]
        # Psi_s - Q at the bin's Q ends, clipped to the allowed range Q <= Psi_s
        a = np.maximum(d_hi_q[None, :] - ds, 0.0)
        b = np.maximum(d_lo_q[None, :] - ds, 0.0)
        a15, b15 = a**1.5, b**1.5
        weight = bound[None, :] * (b15 - a15)
        cum = np.cumsum(weight, axis=1)
        # no allowed orbit (a star at the tracer's edge, where f = 0): left at rest
        stuck = cum[:, -1] <= 0.0
        half_w2[pending[stuck]] = 0.0
        pending, a15, b15, cum = pending[~stuck], a15[~stuck], b15[~stuck], cum[~stuck]
        pick = (1.0 - rng.uniform(size=pending.size)) * cum[:, -1]  # in (0, total]
        k = np.minimum((cum < pick[:, None]).sum(axis=1), len(bound) - 1)
        rows = np.arange(pending.size)
        y = a15[rows, k] + rng.uniform(size=pending.size) * (b15[rows, k] - a15[rows, k])
        hw2 = y ** (2.0 / 3.0)  # w^2 / 2 = Psi_s - Q
        q = psi_s[pending] - hw2
        f_q = df(q, depth_s[pending] + hw2, clip_negative=True)
        accept = rng.uniform(size=pending.size) * bound[k] < f_q
        half_w2[pending[accept]] = hw2[accept]
        pending = pending[~accept]
    else:
        raise RuntimeError("velocity rejection sampling did not finish")
    w = np.sqrt(2.0 * half_w2)
    cos_e = rng.uniform(-1.0, 1.0, size=n)
    ang = rng.uniform(0.0, 2.0 * np.pi, size=n)
    w_t = w * np.sqrt(1.0 - cos_e**2)
    shrink = 1.0 / np.sqrt(1.0 + (r / df.r_a) ** 2)
    return Velocities(
        v_r=w * cos_e, v_theta=w_t * np.cos(ang) * shrink, v_phi=w_t * np.sin(ang) * shrink
    )


def sample_velocities_gaussian(mass_model, light, anisotropy, r, rng, orders=None):
    """APPROXIMATE velocities: Gaussians with the Jeans dispersions, for any anisotropy.

    v_r ~ N(0, sigma_r(r)), v_theta and v_phi ~ N(0, sigma_r(r) sqrt(1 - beta(r))), sigma_r from
    :func:`halo.physics.jeans.sigma_r` (so not independent of the Jeans solver). The second moments are
    those of the Jeans model; the velocity distribution itself is not an equilibrium one (its
    shape, e.g. kurtosis and escape-speed cut, is wrong).

    Parameters
    ----------
    mass_model, light, anisotropy : as for :func:`halo.physics.jeans.sigma_r`
    r : 3D radii [kpc]
    rng : numpy.random.Generator
    orders : :class:`halo.physics.jeans.Orders` (default: the solver's default)

    Returns
    -------
    :class:`Velocities` [km/s]
    """
    r = np.asarray(r, dtype=float)
    kw = {} if orders is None else {"orders": orders}
    s_r = _blockwise(functools.partial(_jeans_sigma_r, **kw), (mass_model, light, anisotropy), r)
    s_t = s_r * np.sqrt(1.0 - np.asarray(anisotropy.beta(jnp.asarray(r))))
    n = r.size
    return Velocities(
        v_r=s_r * rng.standard_normal(n),
        v_theta=s_t * rng.standard_normal(n),
        v_phi=s_t * rng.standard_normal(n),
    )


def line_of_sight_velocity(pos, vel):
    """Line-of-sight velocity v_z = v_r cos(theta) - v_theta sin(theta) [km/s].

    z is the line of sight and theta the polar angle from it (``pos`` a :class:`Positions`, ``vel``
    a :class:`Velocities`).
    """
    cos_t = np.where(pos.r > 0, pos.z / np.where(pos.r > 0, pos.r, 1.0), 1.0)
    sin_t = pos.R / np.where(pos.r > 0, pos.r, 1.0)
    return vel.v_r * cos_t - vel.v_theta * sin_t


# ------------------------------------------------------------------------------------------- sky


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


def _ellipse_offsets(x, y, ellipticity, pa_deg):
    """(xi, eta) [same unit as x, y]: stretch x to the major axis by 1/sqrt(q), y by sqrt(q),
    q = 1 - e (area preserving), then rotate the major axis to PA east of north."""
    q = 1.0 - ellipticity
    a_maj, b_min = x / math.sqrt(q), y * math.sqrt(q)
    pa = math.radians(pa_deg)
    xi = a_maj * math.sin(pa) + b_min * math.cos(pa)
    eta = a_maj * math.cos(pa) - b_min * math.sin(pa)
    return xi, eta


# ------------------------------------------------------------------------------------ catalogue


class MockCatalogue(NamedTuple):
    """A mock: ``table`` (the catalogue), ``truth`` (plain scalars, lists and dicts) and ``stars``
    (per-star truth: id; x, y, z, r, R, R_ell (elliptical radius), xi, eta (east and north offsets
    in the tangent plane) [kpc]; v_r, v_theta, v_phi, vlos_true [km/s])."""

    table: Table
    truth: dict
    stars: Table


def _params(obj):
    """Class name and float fields of a parameter pytree (for the truth record)."""
    if obj is None:
        return None
    out = {"class": type(obj).__name__}
    for field in dataclasses.fields(obj):
        value = getattr(obj, field.name)
        out[field.name] = value if isinstance(value, int | str) else float(value)
    return out


def _name_of(obj, registry):
    return next((k for k, cls in registry.items() if isinstance(obj, cls)), type(obj).__name__)


DEFAULT_FOREGROUND = ((50.0, 40.0, 0.6), (-30.0, 90.0, 0.4))


def _default_population():
    from halo.physics.binaries import BinaryPopulation

    return BinaryPopulation()


def _foreground_rows(
    sat, n, field_radius_pc, components, v_sys, err_range, epochs, repeat_fraction, rng, id0
):
    """Non-member rows: uniform over a disc about the centre, broad velocities, same epochs."""
    r_max = (5.0 * sat.r_half_pc if field_radius_pc is None else float(field_radius_pc)) * 1e-3
    comp = np.asarray(DEFAULT_FOREGROUND if components is None else components, dtype=float)
    rad = r_max * np.sqrt(rng.uniform(size=n))
    phi = rng.uniform(0.0, 2 * np.pi, n)
    ra, dec = sky_coordinates(
        rad * np.sin(phi), rad * np.cos(phi), sat.ra_deg, sat.dec_deg, sat.distance_kpc
    )
    k = rng.choice(len(comp), size=n, p=comp[:, 2] / comp[:, 2].sum())
    v_true = v_sys + comp[k, 0] + comp[k, 1] * rng.standard_normal(n)
    star = np.tile(np.arange(n), len(epochs))
    keep = np.ones(star.size, dtype=bool)
    if epochs[0] is not None and repeat_fraction < 1:
        repeated = rng.uniform(size=n) < repeat_fraction
        keep = (np.repeat(np.arange(len(epochs)), n) == 0) | repeated[star]
    star = star[keep]
    err = rng.uniform(err_range[0], err_range[1], star.size)
    t = Table()
    t["id"] = star + id0
    t["ra"] = u.Quantity(ra[star], u.deg)
    t["dec"] = u.Quantity(dec[star], u.deg)
    t["vlos"] = u.Quantity(v_true[star] + err * rng.standard_normal(star.size), u.km / u.s)
    t["vlos_err"] = u.Quantity(err, u.km / u.s)
    if epochs[0] is not None:
        t["mjd"] = np.repeat(np.array(epochs, dtype=float), n)[keep]
    t.meta["field_radius_pc"] = r_max * 1e3
    t.meta["components"] = [[float(x) for x in c] for c in comp]
    return t


def make_mock(
    satellite,
    dark=None,
    stellar_mass=None,
    anisotropy=None,
    n_stars=500,
    v_sys=0.0,
    error_range_kms=(1.0, 3.0),
    seed=0,
    method="df",
    *,
    epochs_mjd=None,
    velocity_offsets=None,
    df_options=None,
    allow_unphysical=False,
    repeat_fraction=1.0,
    binary_fraction=0.0,
    binary_population=None,
    n_foreground=0,
    foreground_components=None,
    field_radius_pc=None,
):
    """Mock velocity catalogue of a satellite with a known truth.

    Parameters
    ----------
    satellite : :class:`halo.inputs.satellite.Satellite` or a mapping of satellite-file keys; gives the
        centre, distance, major-axis half-light radius, ellipticity, position angle, light profile
        and (unless ``stellar_mass`` is given) the stellar mass
    dark : a dark profile from :mod:`halo.physics.dark`, or None for stars only
    stellar_mass : total stellar mass [Msun] (default: the satellite's central value)
    anisotropy : a model from :mod:`halo.physics.anisotropy` (default isotropic); ``method="df"`` takes
        isotropic and Osipkov-Merritt models only
    n_stars : number of stars
    v_sys : systemic velocity [km/s]
    error_range_kms : (low, high): each measurement's error is uniform in this range [km/s]
    seed : seed of the numpy Generator (the same seed gives the same catalogue); None draws a
        fresh one, recorded in the truth
    method : "df" (equilibrium distribution function, see :func:`distribution_function`) or
        "gaussian" (approximate, see :func:`sample_velocities_gaussian`)
    epochs_mjd : None (one measurement per star, no ``mjd`` column) or a list of MJDs: each star is
        observed at every epoch with the same true velocity and independent errors
    velocity_offsets : optional callable ``(rng, star_index, mjd) -> offsets [km/s]`` (per row; mjd
        is None without epochs) added to the true velocities, e.g. binary orbital motion
    df_options : keyword arguments for :func:`distribution_function`
    allow_unphysical : with ``method="df"``, sample max(f, 0) when f < 0 somewhere instead of
        raising :class:`halo.core.errors.InputError` (``truth["df_physical"]`` records it)
    repeat_fraction : with several epochs, the fraction of stars observed at every epoch (the
        others only at the first), chosen at random
    binary_fraction : fraction of the members that are binaries; each binary's orbit is drawn
        from ``binary_population`` (default :class:`halo.physics.binaries.BinaryPopulation`) orbit by
        orbit and its line-of-sight orbital velocity added at every epoch (t = mjd - first epoch)
    n_foreground : non-member stars added uniformly over a disc of ``field_radius_pc`` (default
        5 major-axis half-light radii), with velocities from ``foreground_components``: (offset
        from v_sys, sigma, weight) [km/s], default ((50, 40, 0.6), (-30, 90, 0.4)) (a broad
        two-component stand-in for a Galactic field, common practice)

    Returns
    -------
    :class:`MockCatalogue`: ``table`` with columns id, ra [deg], dec [deg], vlos [km/s], vlos_err
    [km/s] (and mjd), its ``meta["truth"]`` = ``truth``; ``truth`` with the input parameters, the
    light profile, r_1/2 and M(<r_1/2) (3D), the DF check; ``stars`` with the per-star truth.

    Notes
    -----
    The spherical model uses the circularised half-light radius r_half sqrt(1 - e); positions are
    made elliptical by the area-preserving stretch described in the module notes, so the elliptical
    radii follow the light profile with the major-axis r_half and the circularised radii are the
    spherical model's projected radii. Observed vlos = v_sys + true vlos (+ offsets) + N(0, err).
    """
    sat = satellite if isinstance(satellite, Satellite) else parse_satellite(dict(satellite))
    if method not in ("df", "gaussian"):
        raise InputError(f"mock: method must be 'df' or 'gaussian', got {method!r}")
    lo_err, hi_err = (float(v) for v in error_range_kms)
    if not 0.0 <= lo_err <= hi_err:
        raise InputError(f"mock: error range must be 0 <= low <= high, got {error_range_kms!r}")
    if int(n_stars) < 1:
        raise InputError(f"mock: n_stars must be positive, got {n_stars!r}")
    n_stars = int(n_stars)
    light = sat.light()
    m_star = float(sat.stellar_mass_prior()[0] if stellar_mass is None else stellar_mass)
    anis = Constant(0.0) if anisotropy is None else anisotropy
    stars_mass = Stars(light, m_star)
    mass_model = stars_mass if dark is None else MassModel((dark, stars_mass))
    if seed is None:
        seed = int(np.random.SeedSequence().entropy)
    rng = np.random.default_rng(seed)

    pos = sample_positions(light, n_stars, rng)
    df_physical = None
    if method == "df":
        df = distribution_function(mass_model, light, anis, **(df_options or {}))
        df_physical = df.is_physical
        vel = sample_velocities_df(df, pos.r, rng, allow_unphysical=allow_unphysical)
    else:
        vel = sample_velocities_gaussian(mass_model, light, anis, pos.r, rng)
    v_true = line_of_sight_velocity(pos, vel)

    xi, eta = _ellipse_offsets(pos.x, pos.y, sat.ellipticity, sat.position_angle_deg)
    ra, dec = sky_coordinates(xi, eta, sat.ra_deg, sat.dec_deg, sat.distance_kpc)

    epochs = [None] if epochs_mjd is None else [float(m) for m in epochs_mjd]
    star = np.tile(np.arange(n_stars), len(epochs))
    mjd = np.repeat(np.array(epochs, dtype=float), n_stars) if epochs_mjd is not None else None
    n_rows = star.size
    err = rng.uniform(lo_err, hi_err, size=n_rows)
    offsets = np.zeros(n_rows)
    if velocity_offsets is not None:
        offsets = np.asarray(velocity_offsets(rng, star, mjd), dtype=float).reshape(n_rows)
    is_binary = np.zeros(n_stars, dtype=bool)
    bin_period = np.full(n_stars, np.nan)
    bin_k = np.full(n_stars, np.nan)
    if binary_fraction > 0:
        from halo.physics.binaries import BinaryPopulation, los_velocity, sample_orbits

        pop = BinaryPopulation() if binary_population is None else binary_population
        is_binary = rng.uniform(size=n_stars) < binary_fraction
        orb = sample_orbits(pop, n_stars, rng)
        per_row = orb.take(star)
        t = np.zeros(n_rows) if mjd is None else mjd - mjd.min()
        offsets = offsets + np.where(is_binary[star], los_velocity(per_row, t), 0.0)
        bin_period = np.where(is_binary, orb.period_days, np.nan)
        bin_k = np.where(is_binary, orb.k_kms, np.nan)
    vlos = v_sys + v_true[star] + offsets + err * rng.standard_normal(n_rows)
    keep = np.ones(n_rows, dtype=bool)
    if mjd is not None and repeat_fraction < 1:
        repeated = rng.uniform(size=n_stars) < repeat_fraction
        keep = (mjd == mjd.min()) | repeated[star]

    r_half_3d = float(light.r_half_3d())
    truth = {
        "seed": seed,
        "method": method,
        "n_stars": n_stars,
        "v_sys_kms": float(v_sys),
        "error_range_kms": [lo_err, hi_err],
        "epochs_mjd": None if epochs_mjd is None else epochs,
        "velocity_offsets": velocity_offsets is not None,
        "repeat_fraction": float(repeat_fraction),
        "binary_fraction": float(binary_fraction),
        "binary_population": None
        if binary_fraction <= 0
        else dataclasses.asdict(binary_population or _default_population()),
        "n_binaries": int(is_binary.sum()),
        "satellite": sat.as_dict(),
        "light_profile": _name_of(light, LIGHT_PROFILES),
        "light": _params(light),
        "r_half_2d_kpc": float(light.r_half_2d()),
        "r_half_3d_kpc": r_half_3d,
        "stellar_mass_msun": m_star,
        "dark_profile": None if dark is None else _name_of(dark, DARK_PROFILES),
        "dark": _params(dark),
        "anisotropy_model": _name_of(anis, ANISOTROPIES),
        "anisotropy": _params(anis),
        "m_half_msun": float(mass_model.mass(r_half_3d)),
        "m_half_dark_msun": None if dark is None else float(dark.mass(r_half_3d)),
        "df_physical": df_physical,
    }
    table = Table()
    table["id"] = star[keep]
    table["ra"] = u.Quantity(ra[star][keep], u.deg)
    table["dec"] = u.Quantity(dec[star][keep], u.deg)
    table["vlos"] = u.Quantity(vlos[keep], u.km / u.s)
    table["vlos_err"] = u.Quantity(err[keep], u.km / u.s)
    if mjd is not None:
        table["mjd"] = mjd[keep]
    if n_foreground > 0:
        fg = _foreground_rows(
            sat,
            int(n_foreground),
            field_radius_pc,
            foreground_components,
            v_sys,
            (lo_err, hi_err),
            epochs,
            repeat_fraction,
            rng,
            n_stars,
        )
        truth["n_foreground"] = int(n_foreground)
        truth["foreground_ids"] = [int(i) for i in np.unique(fg["id"])]
        truth["field_radius_pc"] = float(fg.meta["field_radius_pc"])
        truth["foreground_components"] = fg.meta["components"]
        fg.meta.clear()
        table = vstack([table, fg])
    table.meta["truth"] = truth
    q = 1.0 - sat.ellipticity
    stars = Table(
        {
            "id": np.arange(n_stars),
            "x": pos.x,
            "y": pos.y,
            "z": pos.z,
            "r": pos.r,
            "R": pos.R,
            "R_ell": pos.R / math.sqrt(q),
            "xi": xi,
            "eta": eta,
            "v_r": vel.v_r,
            "v_theta": vel.v_theta,
            "v_phi": vel.v_phi,
            "vlos_true": v_true,
            "is_binary": is_binary,
            "binary_period_days": bin_period,
            "binary_k_kms": bin_k,
        }
    )
    return MockCatalogue(table=table, truth=truth, stars=stars)
