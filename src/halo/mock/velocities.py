"""Star velocities at given radii: exact draws from a tabulated distribution function, or
approximate Gaussians with the Jeans dispersions; and their line-of-sight component.

- ``"df"`` (equilibrium, exact): speeds by rejection sampling from f(Q) times the phase-space
  volume at the star's radius (:func:`sample_velocities_df`), f from
  :func:`halo.mock.distribution.distribution_function`. Independent of the Jeans solver, so a
  mock made this way is a non-circular check of it.
- ``"gaussian"`` (approximate, any anisotropy): v_r ~ N(0, sigma_r(r)) and each tangential
  component ~ N(0, sigma_r sqrt(1 - beta(r))) with sigma_r from
  :func:`halo.physics.jeans.sigma_r` (:func:`sample_velocities_gaussian`). The second moments are
  right; the velocity distribution is not an equilibrium one.
- ``"auto"`` (the default of mocks): ``"df"`` when the model has an equilibrium DF (isotropic or
  Osipkov-Merritt, f >= 0 within its tolerance), else ``"gaussian"``, with the reason in one line
  (:func:`choose_method`). An isotropic cored tracer in a cusped halo has none (see
  :func:`halo.mock.distribution.distribution_function`).
"""

import functools
import math
from typing import NamedTuple

import jax.numpy as jnp
import numpy as np

from halo.core.errors import InputError
from halo.mock.blocks import blockwise, mass_and_density
from halo.mock.distribution import anisotropy_radius, distribution_function
from halo.physics.anisotropy import ANISOTROPIES, Constant
from halo.physics.jeans import sigma_r as _jeans_sigma_r

__all__ = [
    "MethodChoice",
    "choose_method",
    "Velocities",
    "sample_velocities_df",
    "sample_velocities_gaussian",
    "line_of_sight_velocity",
]


#: what the Gaussian method is, as the reasons of :func:`choose_method` say it
GAUSSIAN_NOTE = "velocities drawn from Gaussians with the Jeans dispersions (approximate)"


class MethodChoice(NamedTuple):
    """The velocity method of a mock: ``method`` ("df" or "gaussian"), ``reason`` (one line:
    "requested", or why ``"auto"`` chose it) and ``df`` (the tabulated distribution function when
    one was computed, else None)."""

    method: str
    reason: str
    df: object


def _df_kind(anisotropy):
    """'isotropic' or 'Osipkov-Merritt (r_a = ... pc)'; None when there is no DF for it here."""
    try:
        r_a = anisotropy_radius(anisotropy)
    except InputError:
        return None
    return "isotropic" if math.isinf(r_a) else f"Osipkov-Merritt (r_a = {r_a * 1e3:.3g} pc)"


def _anisotropy_name(anisotropy):
    if isinstance(anisotropy, Constant):
        return f"constant anisotropy beta = {float(anisotropy.value):g}"
    name = next((k for k, c in ANISOTROPIES.items() if isinstance(anisotropy, c)), None)
    return f"{name or type(anisotropy).__name__} anisotropy"


def _cored_in_cusp(mass_model, light, r0):
    """Whether the tracer is flat (|d log nu / d log r| < 0.1) and the total density steep (> 0.5)
    over the decade above ``r0`` [kpc], the grid's innermost radius."""
    r = r0 * np.array([1.0, 10.0])
    _, rho = blockwise(mass_and_density, (mass_model,), r)
    nu = np.asarray(light.density(jnp.asarray(r)))
    return bool(np.log10(nu[0] / nu[1]) < 0.1 and np.log10(rho[0] / rho[1]) > 0.5)


def _negative_reason(df, kind, mass_model, light):
    """Where and how much the tabulated DF is negative, in words."""
    f_max = float(df.f.max())
    neg = np.flatnonzero(df.f < -df.rtol_negative * abs(f_max))
    r_pc = np.exp(df.ln_r[neg[[0, -1]]]) * 1e3
    if neg[0] == 0:
        where = f"at the centre (orbits confined within r = {r_pc[1]:.2g} pc"
    else:
        where = f"at intermediate energies (those of Psi(r), r = {r_pc[0]:.2g} to {r_pc[1]:.2g} pc"
    what = f"the {kind} distribution function of this model"
    r0 = math.exp(df.ln_r[0])
    if kind == "isotropic" and neg[0] == 0 and _cored_in_cusp(mass_model, light, r0):
        what = "the isotropic distribution function of a cored tracer in this cusped halo"
    ratio = f"min f / max f = {df.f.min() / f_max:.3g}" if f_max > 0 else "f is nowhere positive"
    return f"{what} is negative {where}; {ratio})"


def choose_method(mass_model, light, anisotropy, method="auto", df_options=None):
    """The velocity method of a mock, and the DF when it was computed (:class:`MethodChoice`).

    ``"df"`` and ``"gaussian"`` are taken as requested (``"df"`` computes the DF; the sampler
    refuses a negative one). ``"auto"`` computes the DF when the anisotropy has one here
    (isotropic or Osipkov-Merritt) and uses it when :attr:`DistributionFunction.is_physical`;
    otherwise (another anisotropy, a central potential that diverges, or f < 0 somewhere) it takes
    the Gaussians, and the reason says which and why in one line.
    """
    options = df_options or {}
    if method == "gaussian":
        return MethodChoice("gaussian", "requested", None)
    if method == "df":
        df = distribution_function(mass_model, light, anisotropy, **options)
        return MethodChoice("df", "requested", df)
    kind = _df_kind(anisotropy)
    if kind is None:
        why = f"{_anisotropy_name(anisotropy)} has no distribution function here (only isotropic"
        return MethodChoice("gaussian", f"{why} and Osipkov-Merritt ones): {GAUSSIAN_NOTE}", None)
    try:
        df = distribution_function(mass_model, light, anisotropy, **options)
    except InputError as exc:  # e.g. a central potential that diverges
        why = str(exc).split("; use")[0].removeprefix("distribution function: ")
        return MethodChoice("gaussian", f"no distribution function ({why}): {GAUSSIAN_NOTE}", None)
    if df.is_physical:
        why = f"the {kind} distribution function of this model is non-negative"
        return MethodChoice("df", f"{why}: velocities drawn from it (equilibrium)", df)
    why = _negative_reason(df, kind, mass_model, light)
    return MethodChoice("gaussian", f"{why}: {GAUSSIAN_NOTE}", df)


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
    :func:`halo.physics.jeans.sigma_r` (so not independent of the Jeans solver). The second moments
    are those of the Jeans model; the velocity distribution itself is not an equilibrium one (its
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
    s_r = blockwise(functools.partial(_jeans_sigma_r, **kw), (mass_model, light, anisotropy), r)
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
