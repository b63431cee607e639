"""The tracer's distribution function in the total potential: Eddington (isotropic) or
Osipkov-Merritt inversion, tabulated on a log grid of radii.

numpy/scipy code (float64), not traced JAX: mocks are made once, outside any fit. The profiles are
still the project's JAX functions; the derivatives of the tracer density come from JAX's
automatic differentiation.
"""

import dataclasses
import functools
import math

import jax
import numpy as np
from scipy.interpolate import PchipInterpolator

from halo.core.constants import G
from halo.core.errors import InputError
from halo.core.numerics import gauss_legendre01
from halo.mock.blocks import blockwise, mass_and_density
from halo.mock.positions import log_radius_grid
from halo.physics.anisotropy import Constant, OsipkovMerritt

__all__ = ["DistributionFunction", "distribution_function", "anisotropy_radius"]

_LN10 = math.log(10.0)


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


def _potential(mass_model, ln_r, n_panel, outer_dex, n_outer):
    """Depth D_k = Psi(0) - Psi(r_k), panel drops Psi(r_k) - Psi(r_k+1) and Psi(0) [(km/s)^2].

    dPsi/d ln r = -G M / r, integrated by ``n_panel``-point Gauss-Legendre per grid panel in ln r.
    Below r_0 the mass is a power law M ~ r^p (p = 4 pi r^3 rho / M at r_0): Psi(0) - Psi(r_0) =
    G M(r_0) / (r_0 (p - 1)). Beyond the grid, panels in ln r out to 10**outer_dex r_top and a
    power-law tail G M / (r (1 - p)) there.
    """
    t, w = gauss_legendre01(n_panel)
    h = np.diff(ln_r)
    nodes = ln_r[:-1, None] + h[:, None] * t[None, :]
    m, _ = blockwise(mass_and_density, (mass_model,), np.exp(nodes))
    drops = h * np.sum(w * G * m / np.exp(nodes), axis=1)
    # inside the grid
    m0, rho0 = (float(v) for v in blockwise(mass_and_density, (mass_model,), math.exp(ln_r[0])))
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
    m, _ = blockwise(mass_and_density, (mass_model,), np.exp(nodes))
    outer = float(np.sum(ho[:, None] * w * G * m / np.exp(nodes)))
    r_far = math.exp(ln_out[-1])
    m_far, rho_far = (float(v) for v in blockwise(mass_and_density, (mass_model,), r_far))
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


def _edge_node(h, h2, drops, ln_r, light):
    """h2 with its last node replaced, when the grid ends at the tracer's edge, by the value that
    makes the last panel's trapezoid of h2 equal h[-2] - h[-1] (its exact integral in Psi).

    At a truncated tracer's edge d^2 nu / d Psi^2 is singular but integrable (King: nu ~
    (r_t - r)^(3/2), so h2 ~ (r_t - r)^(-1/2)); sampled at a node rounded just inside r_t it can be
    ~1e7 times its neighbours, and the linear panel then adds a spurious positive f at every energy.
    """
    if ln_r[-1] < math.log(float(light.r_edge())) - 1e-9:
        return h2
    h2 = np.array(h2)
    h2[-1] = 2.0 * (h[-2] - h[-1]) / drops[-1] - h2[-2]
    return h2


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


def anisotropy_radius(anisotropy):
    """r_a [kpc] of an isotropic (inf) or Osipkov-Merritt model; InputError for any other."""
    if anisotropy is None or (isinstance(anisotropy, Constant) and float(anisotropy.value) == 0.0):
        return math.inf
    elif isinstance(anisotropy, OsipkovMerritt):
        return float(anisotropy.r_a)
    else:
        raise InputError(
            "distribution function: only isotropic and Osipkov-Merritt anisotropy are supported "
            f"(got {type(anisotropy).__name__}); use method='gaussian'"
        )


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
        generating the potential (e.g. :class:`halo.physics.mass.MassModel` of a dark halo and the
        stars)
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
    centre, Psi(0) - Psi, which keeps them accurate deep in the potential. A truncated tracer
    (King) has an integrable singularity of d^2 nu_Q / d Psi^2 at its edge, where the grid ends: the
    last node takes the value that integrates the last panel exactly (:func:`_edge_node`; King
    c = 3 in an NFW halo: f(Psi(0)) within 1e-5 of its integral by parts below, in
    tests/test_mock_default_method.py; f within 4e-5 of a direct quadrature of the formula above
    over most energies and 2e-3 near the edge [computed]).

    Accuracy (tests/test_mock_df.py, defaults): relative error of f 4e-5 against the self-consistent
    Plummer f(E) ~ E^(7/2) (for Q = Psi(r), r from 10^-2 to 10^2 R_e), 8e-5 against the Hernquist
    (1990) closed form (r from 10^-3 to 10^3 a), 1e-5 of max f against the Osipkov-Merritt Plummer
    f(Q); the error falls as n_grid^-2 (6e-4, 1.6e-4, 4e-5 at 500, 1000, 2000 nodes). The
    potential's relative error is ~1e-11.

    Not every model has a non-negative f: Osipkov-Merritt Plummer spheres need r_a >= 3a/4, and a
    cored tracer (Plummer, King) in a cusped potential (NFW) has f < 0 at the most bound energies
    when isotropic. :attr:`DistributionFunction.is_physical` flags this. The reason (derived here
    from the formula above): at Q = Psi(0), integrating by parts,
    f(Psi(0)) = -1 / (2 sqrt(8) pi^2) Int_0^Psi(0) (d nu / d Psi) (Psi(0) - Psi)^(-3/2) dPsi < 0
    whenever the integral converges, since d nu / d Psi > 0 for a tracer falling outwards. In a
    cusp rho ~ r^-gamma, Psi(0) - Psi ~ r^(2 - gamma), and a cored tracer (nu0 - nu ~ r^2) has
    d nu / d Psi ~ (Psi(0) - Psi)^(gamma / (2 - gamma)): it converges for gamma > 2/3 (NFW:
    gamma = 1); below, f -> -inf at Psi(0). Only a core in the potential too (gamma = 0, Psi
    harmonic) keeps d nu / d Psi non-zero at the centre, where f can then be positive (e.g. a
    Plummer tracer in a cored halo). In closed form, for a Plummer tracer of scale
    a << r_s in an NFW halo, where Psi(0) - Psi = k r with k = 2 pi G rho_s r_s and
    nu = nu0 (1 + s^2)^(-5/2), s = r / a, nu0 = 3 / (4 pi a^3):
    f(Psi(0)) = 5 nu0 (k a)^(-3/2) / (sqrt(8) pi^2) [3 B(5/4, 13/4) - B(1/4, 17/4) / 2]
              = -0.12453 nu0 (k a)^(-3/2)
    (B the Beta function, from Int_0^inf s^(p-1) (1 + s^2)^(-9/2) ds = B(p/2, (9 - p)/2) / 2;
    the bracket is 0.5960 - 1.2912 = -0.6953 = -B(1/4, 13/4) / 4), with relative corrections
    0.21 a / r_s (tests/test_mock_default_method.py). So no isotropic equilibrium of this kind
    exists, for any halo mass or concentration (min f / max f = -1.43 when a << r_s): the mocks'
    default method then draws Jeans Gaussians instead (:func:`halo.mock.velocities.choose_method`).

    References
    ----------
    Eddington A. S. 1916, MNRAS 76, 572; Osipkov L. P. 1979, Pis'ma Astron. Zh. 5, 77;
    Merritt D. 1985, AJ 90, 1027; Binney J. & Tremaine S. 2008, Galactic Dynamics, 2nd ed.,
    sec. 4.3.
    """
    r_a = anisotropy_radius(anisotropy)
    ln_r = log_radius_grid(light, lo_dex, hi_dex, n_grid)
    depth, drops, psi_c = _potential(mass_model, ln_r, n_panel, outer_dex, n_outer)
    psi = psi_c - depth
    inv_ra2 = 0.0 if math.isinf(r_a) else 1.0 / r_a**2
    _, h, h2 = blockwise(_tracer_terms, (mass_model, light, inv_ra2), np.exp(ln_r))
    h2 = _edge_node(h, h2, drops, ln_r, light)
    integral = np.concatenate(
        [
            _product_integral(depth, drops, h2, np.arange(j, min(j + chunk, n_grid)))
            for j in range(0, n_grid, chunk)
        ]
    )
    f = (integral + h[-1] / np.sqrt(psi)) / (math.sqrt(8.0) * math.pi**2)
    m_nodes = blockwise(mass_and_density, (mass_model,), np.exp(ln_r))[0]
    slope = G * m_nodes / np.exp(ln_r)
    return DistributionFunction(ln_r=ln_r, psi=psi, depth=depth, slope=slope, f=f, r_a=r_a)
