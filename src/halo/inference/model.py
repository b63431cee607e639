"""The numpyro model: priors from a spec and the satellite file, and the per-star likelihood.

Parameters (sample sites)
-------------------------
From the spec, by prior kind:

- ``log-uniform`` NAME in [low, high]: site ``log10_NAME`` uniform in log10.
- ``uniform`` / ``normal``: site ``NAME``.
- ``symmetrised-uniform``: site ``NAME_sym`` uniform in beta~ = beta / (2 - beta) (so that radial
  and tangential anisotropy get equal prior weight, common practice); beta = 2 beta~ / (1 + beta~).
- ``concentration``: site ``log10_c200`` ~ Normal(log10 c_med(M200), scatter) from the named
  mass-concentration relation; with a galactocentric distance in the satellite file the spec's
  ``subhalo_relation`` is used instead.
- ``fixed``: no site.

Always present (nuisances, so that their uncertainties reach every result):

- ``v_sys`` [km/s]: Normal(v_sys_kms, v_sys_err_kms) when the satellite file gives both; else
  uniform within +-V_SYS_HALF_WIDTH of the file's ``v_sys_kms``, or of the peak of the velocity
  distribution of the stars near the centre (:mod:`halo.inference.systemic`), where every chain
  starts. The same in every model, so it cancels in Bayes factors;
- ``distance`` [kpc]: Normal(distance_kpc, distance_err_kpc), truncated at 1/10 of the value;
- ``r_half_pc`` [pc]: the projected major-axis half-light radius at the file's distance,
  Normal(r_half_pc, r_half_err_pc) truncated positive. The angular size is what is measured, so
  the physical circularised radius is r_half_pc sqrt(1 - e) x distance / distance_kpc, and
  r_half_err_pc is read as the error at fixed distance (the angular error x distance_kpc), so
  the distance error enters once, through ``distance``;
- the stellar mass [Msun]: ``m_star_d0`` ~ Normal(stellar_mass_msun, err) truncated positive, or,
  from a magnitude, ``ml_v`` uniform in ``stellar_ml_v`` times L_V with ``abs_mag_v`` ~ Normal;
  both hold at the file's distance d0 (a luminosity, and a stellar mass inferred from one, scale
  as distance^2, common practice), so the mass used, ``m_star``, is that times (distance / d0)^2.

Likelihood
----------
Plain: v_i ~ Normal(v_sys, sigma_los(R_i)^2 + err_i^2) with R_i = distance tan(theta_i) (theta_i the
circularised angular radius). With binaries and/or foreground the per-star likelihood is the
mixture of :mod:`halo.inference.likelihood` (epochs used jointly, binary fraction ``f_binary``,
foreground ``v_fg``/``log10_sigma_fg`` and member fraction ``f_member``). sigma_los is solved
once per likelihood call on ``n_radii`` log-spaced angles spanning the stars and interpolated
in (ln theta, ln sigma_los) by the not-a-knot cubic spline, kept within 0.05 of its two nodes'
range (error at the stars below 1e-4, measured 2e-6 to 4e-5 with the 32 default angles over the
specs' anisotropy prior, at the FAST solver's level, against a direct solve:
tests/test_interpolation_at_stars.py; linear interpolation reached 2e-3, the monotone PCHIP cubic
1.3e-3 at the extrema of sigma_los). The catalogue is an argument of the sampled program,
padded to a bucket size (:mod:`halo.inference.padding`).
"""

import dataclasses
import functools

import jax
import jax.numpy as jnp
import numpy as np
import numpyro
import numpyro.distributions as dist

from halo.core.constants import DEG
from halo.core.vocabulary import luminosity_v
from halo.inference.interpolation import sigma_at_stars
from halo.inference.likelihood import (
    PerStarLikelihood,
    foreground_log_density,
    member_log_terms,
    spatial_log_prior,
)
from halo.inference.padding import pad_stars
from halo.inference.systemic import V_SYS_HALF_WIDTH, prior_centres
from halo.inputs.build import build_anisotropy, build_mass_model
from halo.physics.anisotropy import symmetrised_to_beta
from halo.physics.concentration import lognormal_prior
from halo.physics.cosmology import rho_crit
from halo.physics.jeans import FAST, sigma_los

__all__ = ["FitData", "Foreground", "make_fit_data", "make_model", "V_SYS_HALF_WIDTH"]


@jax.tree_util.register_dataclass
@dataclasses.dataclass(frozen=True)
class FitData:
    """Per-star arrays for the likelihood (plain JAX arrays, km/s and radians).

    ``v``/``v_err``: each star's inverse-variance weighted mean velocity over its epochs and its
    uncertainty (1/sqrt W). ``log_c0``, ``log_c1``, ``log_w``, ``bin_loc``, ``bin_scale``: the
    multi-epoch constants of :mod:`halo.inference.likelihood` (zeros and None for plain
    single-epoch data). ``log_prior_member`` / ``log_prior_non``: ln p_i and ln(1 - p_i) from a
    ``member_prob`` column, or None (spatial prior). ``theta_max``: the survey radius (outermost
    star) [rad]. A JAX pytree: the sampled model takes it as an argument.
    """

    v: jnp.ndarray
    v_err: jnp.ndarray
    theta: jnp.ndarray  # circularised angular radius [rad]
    grid_theta: jnp.ndarray  # angles where sigma_los is solved [rad]
    idx: jnp.ndarray  # interpolation interval per star
    w: jnp.ndarray  # interpolation weight per star (in ln theta)
    log_c0: jnp.ndarray | None = None
    log_c1: jnp.ndarray | None = None
    log_w: jnp.ndarray | None = None
    bin_loc: jnp.ndarray | None = None
    bin_scale: jnp.ndarray | None = None
    log_prior_member: jnp.ndarray | None = None
    log_prior_non: jnp.ndarray | None = None
    theta_max: jnp.ndarray | None = None
    mask: jnp.ndarray | None = None  # 1.0 a real star, 0.0 padding (halo.inference.padding)

    @property
    def n_stars(self):
        return int(self.v.shape[0])


def make_fit_data(
    v, v_err, radius_deg, n_radii=32, epochs=None, member_prob=None, theta_max_deg=None
):
    """Arrays for the likelihood from per-star velocities, errors and radii [km/s, deg].

    ``epochs``: optional :class:`halo.inference.likelihood.EpochTerms`; ``member_prob``: optional
    per-star prior membership probabilities (clipped to [1e-9, 1]); ``theta_max_deg``: survey radius
    (default 1.001 x the outermost star).
    """
    v = np.asarray(v, dtype=float)
    v_err = np.asarray(v_err, dtype=float)
    theta = np.maximum(np.asarray(radius_deg, dtype=float) * DEG, 1e-9)
    lo, hi = np.log(theta.min()) - 0.01, np.log(theta.max()) + 0.01
    x = np.linspace(lo, hi, n_radii)
    q = (np.log(theta) - lo) / (x[1] - x[0])
    idx = np.clip(np.floor(q).astype(int), 0, n_radii - 2)
    w = q - idx
    n = len(v)
    extra = {
        "log_c0": jnp.zeros(n),
        "log_c1": jnp.zeros(n),
        "theta_max": jnp.asarray(
            1.001 * theta.max() if theta_max_deg is None else theta_max_deg * DEG
        ),
    }
    if epochs is not None:
        extra["log_c0"] = jnp.asarray(epochs.log_c0)
        extra["log_c1"] = jnp.asarray(epochs.log_c1)
        extra["log_w"] = jnp.asarray(epochs.log_w)
        extra["bin_loc"] = jnp.asarray(epochs.loc)
        extra["bin_scale"] = jnp.asarray(epochs.scale)
    if member_prob is not None:
        p = np.clip(np.asarray(member_prob, dtype=float), 1e-9, 1.0)
        extra["log_prior_member"] = jnp.asarray(np.log(p))
        with np.errstate(divide="ignore"):
            extra["log_prior_non"] = jnp.asarray(np.log1p(-p))
    return FitData(
        v=jnp.asarray(v),
        v_err=jnp.asarray(v_err),
        theta=jnp.asarray(theta),
        grid_theta=jnp.asarray(np.exp(x)),
        idx=jnp.asarray(idx),
        w=jnp.asarray(w),
        **extra,
    )


@dataclasses.dataclass(frozen=True)
class Foreground:
    """The non-member velocity distribution.

    ``components``: None for one Gaussian with free mean (``v_fg``, uniform over the range of
    :func:`halo.inference.systemic.prior_centres`) and width (``log10_sigma_fg``, uniform in
    log10 between FG_SIGMA_RANGE), or a tuple of (mean, sigma, weight) [km/s] given by the user.
    """

    components: tuple | None = None


FG_SIGMA_RANGE = (20.0, 300.0)  # km/s: broader than any satellite's dispersion (common practice)


def _truncated_normal(name, mean, sd, low):
    if sd <= 0:
        return numpyro.deterministic(name, jnp.asarray(mean, dtype=jnp.float64))
    return numpyro.sample(name, dist.TruncatedNormal(mean, sd, low=low))


def sample_nuisances(satellite, v_center):
    """Systemic velocity, distance, half-light radius and stellar mass (sample sites)."""
    v_err = getattr(satellite, "v_sys_err_kms", None)
    if v_err is not None and v_err > 0:
        v_sys = numpyro.sample("v_sys", dist.Normal(satellite.v_sys_kms, v_err))
    else:
        v_sys = numpyro.sample(
            "v_sys", dist.Uniform(v_center - V_SYS_HALF_WIDTH, v_center + V_SYS_HALF_WIDTH)
        )
    d0 = satellite.distance_kpc
    distance = _truncated_normal("distance", d0, satellite.distance_err_kpc, 0.1 * d0)
    r_half_pc = _truncated_normal("r_half_pc", satellite.r_half_pc, satellite.r_half_err_pc, 0.0)
    # the file's luminosity and stellar mass hold at its distance d0: at d they scale as (d/d0)^2
    lum_scale = (distance / d0) ** 2
    if satellite.stellar_mass_msun is not None:
        m0 = _truncated_normal(
            "m_star_d0", satellite.stellar_mass_msun, satellite.stellar_mass_err_msun, 0.0
        )
    else:
        lo, hi = satellite.stellar_ml_v
        ml = numpyro.sample("ml_v", dist.Uniform(lo, hi)) if hi > lo else lo
        mag0, dmag = satellite.absolute_magnitude_v, satellite.absolute_magnitude_v_err
        mag = numpyro.sample("abs_mag_v", dist.Normal(mag0, dmag)) if dmag > 0 else mag0
        m0 = ml * luminosity_v(mag)
    m_star = numpyro.deterministic("m_star", m0 * lum_scale)
    r_e_kpc = r_half_pc * 1e-3 * jnp.sqrt(1.0 - satellite.ellipticity) * distance / d0
    numpyro.deterministic("r_e_kpc", r_e_kpc)
    return v_sys, distance, r_e_kpc, m_star


def sample_spec_parameters(spec, satellite):
    """Values of the spec's parameters (dict name -> traced value), sampling their priors."""
    values = {}
    order = sorted(spec.parameters, key=lambda k: spec.parameters[k]["prior"] == "concentration")
    for name in order:
        p = spec.parameters[name]
        kind = p["prior"]
        if kind == "log-uniform":
            lo, hi = np.log10(p["low"]), np.log10(p["high"])
            x = numpyro.sample(f"log10_{name}", dist.Uniform(lo, hi))
            values[name] = numpyro.deterministic(name, 10.0**x)
        elif kind == "uniform":
            values[name] = numpyro.sample(name, dist.Uniform(p["low"], p["high"]))
        elif kind == "normal":
            values[name] = numpyro.sample(name, dist.Normal(p["mean"], p["sigma"]))
        elif kind == "symmetrised-uniform":
            s = numpyro.sample(f"{name}_sym", dist.Uniform(p["low"], p["high"]))
            values[name] = numpyro.deterministic(name, symmetrised_to_beta(s))
        elif kind == "fixed":
            values[name] = jnp.asarray(p["value"], dtype=jnp.float64)
        elif kind == "concentration":
            rel, kw = p["relation"], {}
            if satellite.galactocentric_distance_kpc is not None and "subhalo_relation" in p:
                rel = p["subhalo_relation"]
                kw["distance_kpc"] = satellite.galactocentric_distance_kpc
            mean, sd = lognormal_prior(rel, values["m200"], **kw)
            x = numpyro.sample(f"log10_{name}", dist.Normal(mean, sd))
            values[name] = numpyro.deterministic(name, 10.0**x)
    return values


def _predicted_variance(spec, satellite, data, orders, rho_c, v_center):
    """Priors of the nuisances and of the spec's parameters, then sigma_los^2 + err^2 per star.

    Returns (v_sys, distance, light, var).
    """
    v_sys, distance, r_e, m_star = sample_nuisances(satellite, v_center)
    values = sample_spec_parameters(spec, satellite)
    values["stellar_mass"] = m_star
    light = satellite.light(r_e)
    mass_model, _ = build_mass_model(spec, values, light, rho_c)
    anis = build_anisotropy(spec, values)
    radii = distance * jnp.tan(data.grid_theta)
    sig = sigma_at_stars(sigma_los(mass_model, light, anis, radii, orders), data)
    return v_sys, distance, light, sig**2 + data.v_err**2


@dataclasses.dataclass(frozen=True)
class _BinaryTerms:
    """The binary part of the model: mixture scales, ln weights and the binary-fraction prior."""

    scales: jnp.ndarray
    log_weights: jnp.ndarray
    fraction_range: tuple

    @classmethod
    def of(cls, binaries):
        return cls(
            jnp.asarray(binaries.scales),
            jnp.log(jnp.maximum(jnp.asarray(binaries.weights), 1e-300)),
            getattr(binaries, "fraction_range", (0.0, 1.0)),
        )


def _member_block(data, var, v_sys, log_c0, log_c1, b, keep_terms):
    """(ln L_member, epoch-consistency factor) per star, marginalised over binarity (site
    ``f_binary``)."""
    fb_lo, fb_hi = b.fraction_range
    f_b = numpyro.sample("f_binary", dist.Uniform(fb_lo, fb_hi))
    log_pw = b.log_weights
    log_w = (
        jnp.broadcast_to(log_pw, (data.n_stars, log_pw.shape[0]))
        if data.log_w is None
        else data.log_w
    )
    # each star's own binary mean-offset mixture (widths and means given its epochs) when the
    # data carry one; the population's zero-mean scales otherwise (single-epoch data only)
    scales = b.scales if data.bin_scale is None else data.bin_scale
    loc = 0.0 if data.bin_loc is None else data.bin_loc
    single, binary = member_log_terms(data.v, var, v_sys, log_c0, log_c1, log_w, scales, loc)
    lf, lf1 = jnp.log1p(-f_b), jnp.log(f_b)
    member = jnp.logaddexp(lf + single, lf1 + binary)
    consistency = jnp.logaddexp(lf + log_c0, lf1 + log_c1)
    if keep_terms:
        numpyro.deterministic("ll_single", single)
        numpyro.deterministic("ll_binary", binary)
    return member, consistency


def _foreground_components(foreground, fg_range):
    """(means, sigmas, ln amplitudes) of the non-member velocity distribution: the user's
    components, or one Gaussian with free mean and width (sites ``v_fg``, ``log10_sigma_fg``)."""
    if foreground.components is None:
        mu = numpyro.sample("v_fg", dist.Uniform(*fg_range))
        lo, hi = np.log10(FG_SIGMA_RANGE[0]), np.log10(FG_SIGMA_RANGE[1])
        s_fg = 10.0 ** numpyro.sample("log10_sigma_fg", dist.Uniform(lo, hi))
        return jnp.atleast_1d(mu), jnp.atleast_1d(s_fg), jnp.zeros(1)
    comp = np.asarray(foreground.components, dtype=float)
    means, sigmas = jnp.asarray(comp[:, 0]), jnp.asarray(comp[:, 1])
    return means, sigmas, jnp.asarray(np.log(comp[:, 2] / comp[:, 2].sum()))


def _membership_prior(data, light, distance):
    """(ln p_i, ln(1 - p_i)): the catalogue's member_prob, or the spatial prior with a member
    fraction ``f_member`` uniform in [0, 1]."""
    if data.log_prior_member is not None:
        return data.log_prior_member, data.log_prior_non
    f_m = numpyro.sample("f_member", dist.Uniform(0.0, 1.0))
    return spatial_log_prior(
        light, distance * jnp.tan(data.theta), distance * jnp.tan(data.theta_max), f_m
    )


def _observe(fn, data):
    """The observed site ``v``; padded stars (mask 0) contribute exactly 0."""
    with numpyro.handlers.mask(mask=True if data.mask is None else data.mask > 0):
        return numpyro.sample("v", fn, obs=data.v)


def _foreground_likelihood(data, foreground, member, consistency, light, distance, fixed):
    """The observed site: each star a mixture of member and non-member (``fixed``: v_center and
    keep_terms of :func:`make_model`)."""
    fg_range, keep_terms = fixed
    means, sigmas, log_amps = _foreground_components(foreground, fg_range)
    fg = consistency + foreground_log_density(data.v, data.v_err, means, sigmas, log_amps)
    lp_m, lp_n = _membership_prior(data, light, distance)
    if keep_terms:
        numpyro.deterministic("ll_member", member)
        numpyro.deterministic("ll_foreground", fg)
        numpyro.deterministic("log_prior_member", lp_m)
        numpyro.deterministic("log_prior_non", lp_n)
    _observe(PerStarLikelihood(jnp.logaddexp(lp_m + member, lp_n + fg)), data)


def make_model(
    spec, satellite, data, orders=FAST, binaries=None, foreground=None, keep_terms=False
):
    """A numpyro model for ``spec`` fitted to ``data`` (:class:`FitData`).

    ``binaries``: None, or a :class:`halo.physics.binaries.BinaryMixture` (the line-of-sight
    velocity distribution of binary orbital motion as a scale mixture of Gaussians). With it,
    each star is marginalised over binarity with the binary fraction ``f_binary`` (uniform prior
    on ``binaries.fraction_range``, default [0, 1]) and its epochs used jointly (data.log_c0/
    log_c1/log_w, see :mod:`halo.inference.likelihood`).

    ``foreground``: None, or a :class:`Foreground`: each star is a mixture of member and
    non-member with the prior membership of data.log_prior_member (a ``member_prob`` column) or
    the spatial prior with a member fraction ``f_member`` uniform in [0, 1].

    ``keep_terms``: record the per-star terms as deterministic sites (``ll_single``,
    ``ll_binary``, ``ll_foreground``, ``log_prior_member``) for per-star probabilities, and
    ``var_member`` = sigma_los^2 + v_err^2 at each star.

    ``model(inputs=None)``: ``inputs`` a dict of ``data``, ``v_center``, ``fg_range`` (default:
    ``data`` as given); ``model.compile_args``: the same, stars padded to their bucket
    (:mod:`halo.inference.padding`), arguments of the sampler's compiled program so that
    catalogues of similar size share it; ``model.n_stars``: the real stars; ``start_at_mean``.
    """
    rho_c = rho_crit()
    v_center, fg_range = prior_centres(satellite, data)
    b = None if binaries is None else _BinaryTerms.of(binaries)
    f64 = functools.partial(jnp.asarray, dtype=jnp.float64)
    given = {"data": data, "v_center": f64(v_center), "fg_range": f64(fg_range)}

    def model(inputs=None):
        inputs = given if inputs is None else inputs
        d = inputs["data"]
        log_c0 = jnp.zeros(d.n_stars) if d.log_c0 is None else d.log_c0
        log_c1 = jnp.zeros(d.n_stars) if d.log_c1 is None else d.log_c1
        v_sys, distance, light, var = _predicted_variance(
            spec, satellite, d, orders, rho_c, inputs["v_center"]
        )
        if keep_terms:
            numpyro.deterministic("var_member", var)
        if b is None and foreground is None:
            _observe(dist.Normal(v_sys, jnp.sqrt(var)), d)
            return
        if b is None:
            member = log_c0 + dist.Normal(v_sys, jnp.sqrt(var)).log_prob(d.v)
            consistency = log_c0
        else:
            member, consistency = _member_block(d, var, v_sys, log_c0, log_c1, b, keep_terms)
        if foreground is None:
            _observe(PerStarLikelihood(member), d)
            return
        fixed = (inputs["fg_range"], keep_terms)
        _foreground_likelihood(d, foreground, member, consistency, light, distance, fixed)

    model.compile_args = ({**given, "data": pad_stars(data)},)
    model.n_stars = data.n_stars
    model.start_at_mean = ("v_sys",)  # every chain starts at its prior's mean (sampling.py)
    return model
