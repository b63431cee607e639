"""Mock velocity catalogues with a known truth (validation, the demo satellite, ``halo mock``).

Stars are drawn in three steps, all with a seeded ``numpy.random.Generator``:

1. 3D positions from the light profile (:func:`halo.mock.positions.sample_positions`: inverse of
   the enclosed light fraction, isotropic directions; the line of sight is the z axis).
2. Velocities, by one of two methods (:mod:`halo.mock.velocities`), or ``"auto"`` (the default):
   ``"df"`` when the model has a non-negative DF, else ``"gaussian"``
   (:func:`halo.mock.velocities.choose_method`; ``truth["method_used"]`` and
   ``truth["method_reason"]`` record the choice):

   - ``"df"`` (equilibrium, exact): the distribution function of the tracer in the total potential
     (dark halo + stars) by Eddington inversion, isotropic or Osipkov-Merritt
     (:func:`halo.mock.distribution.distribution_function`), then speeds by rejection sampling
     from f(Q) times the phase-space volume at the star's radius
     (:func:`halo.mock.velocities.sample_velocities_df`). Independent of the Jeans solver, so a
     mock made this way is a non-circular check of it.
   - ``"gaussian"`` (approximate, any anisotropy): v_r ~ N(0, sigma_r(r)) and each tangential
     component ~ N(0, sigma_r sqrt(1 - beta(r))) with sigma_r from
     :func:`halo.physics.jeans.sigma_r` (:func:`halo.mock.velocities.sample_velocities_gaussian`).
     The second moments are right; the velocity distribution is not an equilibrium one.

3. Sky positions: the projected (x, y) of the spherical model, stretched along the major axis by
   1/sqrt(1 - e) and squeezed along the minor one by sqrt(1 - e) (area preserving, so the
   circularised radius is the spherical model's projected radius and the elliptical radius follows
   the light profile with the major-axis half-light radius), rotated to the position angle (east of
   north), divided by the distance (tangent-plane standard coordinates) and placed on the sky by the
   inverse gnomonic projection (:func:`halo.mock.sky.sky_coordinates`).

Then the measurements (:mod:`halo.mock.binaries_epochs`: epochs, errors, binary orbits) and field
stars (:mod:`halo.mock.foreground`). :func:`make_mock` ties these together and returns the
catalogue (columns ``id, ra, dec, vlos, vlos_err`` and ``mjd`` with several epochs) with a
``truth`` dictionary.

The DF and the samplers are numpy/scipy code (float64), not traced JAX: mocks are made once, outside
any fit. The model's profiles are still the project's JAX functions (the derivatives of the tracer
density come from JAX's automatic differentiation).
"""

import dataclasses
import math
from typing import NamedTuple

import astropy.units as u
import numpy as np
from astropy.table import Table

from halo.core.errors import InputError
from halo.inputs.satellite import Satellite, parse_satellite
from halo.mock.binaries_epochs import observe_members, population
from halo.mock.flattened import flattened_phase_space, flattening_for
from halo.mock.foreground import with_foreground
from halo.mock.metallicity import with_metallicities
from halo.mock.positions import sample_positions
from halo.mock.sky import ellipse_offsets, sky_coordinates
from halo.mock.velocities import (
    MethodChoice,
    choose_method,
    line_of_sight_velocity,
    sample_velocities_df,
    sample_velocities_gaussian,
)
from halo.physics.anisotropy import ANISOTROPIES, Constant
from halo.physics.dark import DARK_PROFILES
from halo.physics.light import LIGHT_PROFILES
from halo.physics.mass import MassModel, Stars

__all__ = ["MockCatalogue", "make_mock"]


class MockCatalogue(NamedTuple):
    """A mock: ``table`` (the catalogue), ``truth`` (plain scalars, lists and dicts) and ``stars``
    (per-star truth: id; x, y, z, r, R, R_ell (elliptical radius), xi, eta (east and north offsets
    in the tangent plane) [kpc]; v_r, v_theta, v_phi, vlos_true [km/s])."""

    table: Table
    truth: dict
    stars: Table


class _Model(NamedTuple):
    """The satellite and the mass model a mock is drawn from."""

    sat: Satellite
    light: object
    m_star: float
    dark: object
    anisotropy: object
    mass: object


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


def _checked(method, error_range_kms, n_stars):
    """(n_stars as int, (low, high) error range): InputError on a bad method, range or count."""
    if method not in ("auto", "df", "gaussian"):
        raise InputError(f"mock: method must be 'auto', 'df' or 'gaussian', got {method!r}")
    lo_err, hi_err = (float(v) for v in error_range_kms)
    if not 0.0 <= lo_err <= hi_err:
        raise InputError(f"mock: error range must be 0 <= low <= high, got {error_range_kms!r}")
    if int(n_stars) < 1:
        raise InputError(f"mock: n_stars must be positive, got {n_stars!r}")
    return int(n_stars), (lo_err, hi_err)


def _model(satellite, dark, stellar_mass, anisotropy):
    sat = satellite if isinstance(satellite, Satellite) else parse_satellite(dict(satellite))
    light = sat.light()
    m_star = float(sat.stellar_mass_prior()[0] if stellar_mass is None else stellar_mass)
    anis = Constant(0.0) if anisotropy is None else anisotropy
    stars_mass = Stars(light, m_star)
    mass_model = stars_mass if dark is None else MassModel((dark, stars_mass))
    return _Model(sat, light, m_star, dark, anis, mass_model)


def _flattened_phase_space(model, n_stars, rng, method, q):
    """(positions, velocities, MethodChoice, flattening truth) of the oblate tracer of intrinsic
    axis ratio ``q`` (:mod:`halo.mock.flattened`), beta_z the model's beta at r_1/2."""
    if method == "df":
        raise InputError("mock: a flattened tracer has Gaussian velocities only, not method 'df'")
    sat = model.sat
    beta_z = float(model.anisotropy.beta(model.light.r_half_3d()))
    flat = flattening_for(q, sat.ellipticity, beta_z)
    light_major = sat.light(sat.r_half_pc * 1e-3)
    pos, vel, n_negative = flattened_phase_space(model.mass, light_major, flat, n_stars, rng)
    reason = (
        "flattened tracer: Gaussians with the axisymmetric Jeans moments (sigma_R = sigma_z "
        "sqrt(1 / (1 - beta_z)), beta_z the model's beta at r_1/2)"
    )
    truth = {**flat.as_dict(), "n_negative_vphi2": n_negative}
    return pos, vel, MethodChoice("gaussian", reason, None), truth


def _phase_space(model, n_stars, rng, method, df_options, allow_unphysical):
    """(positions, velocities, the method's :class:`halo.mock.velocities.MethodChoice`)."""
    pos = sample_positions(model.light, n_stars, rng)
    choice = choose_method(model.mass, model.light, model.anisotropy, method, df_options)
    if choice.method == "gaussian":
        vel = sample_velocities_gaussian(model.mass, model.light, model.anisotropy, pos.r, rng)
    else:
        vel = sample_velocities_df(choice.df, pos.r, rng, allow_unphysical=allow_unphysical)
    return pos, vel, choice


def _settings_truth(
    *, seed, method, n_stars, v_sys, error_range, epochs_mjd, velocity_offsets, repeat_fraction,
    binary_fraction, binary_population,
):  # fmt: skip
    return {
        "seed": seed,
        "method": method,
        "n_stars": n_stars,
        "v_sys_kms": float(v_sys),
        "error_range_kms": list(error_range),
        "epochs_mjd": None if epochs_mjd is None else [float(m) for m in epochs_mjd],
        "velocity_offsets": velocity_offsets is not None,
        "repeat_fraction": float(repeat_fraction),
        "binary_fraction": float(binary_fraction),
        "binary_population": None
        if binary_fraction <= 0
        else dataclasses.asdict(population(binary_population)),
    }


def _model_truth(model, df_physical):
    light, dark = model.light, model.dark
    r_half_3d = float(light.r_half_3d())
    m_half_dark = None if dark is None else float(dark.mass(r_half_3d))
    return {
        "satellite": model.sat.as_dict(),
        "light_profile": _name_of(light, LIGHT_PROFILES),
        "light": _params(light),
        "r_half_2d_kpc": float(light.r_half_2d()),
        "r_half_3d_kpc": r_half_3d,
        "stellar_mass_msun": model.m_star,
        "dark_profile": None if dark is None else _name_of(dark, DARK_PROFILES),
        "dark": _params(dark),
        "anisotropy_model": _name_of(model.anisotropy, ANISOTROPIES),
        "anisotropy": _params(model.anisotropy),
        "m_half_msun": float(model.mass.mass(r_half_3d)),
        # the dark mass inside r_1/2, named as in the fit outputs; m_half_dark_msun is its
        # earlier name, kept for one version
        "dark_mass_half_msun": m_half_dark,
        "m_half_dark_msun": m_half_dark,
        "df_physical": df_physical,
    }


def _member_table(obs, ra, dec):
    keep, star = obs.keep, obs.star
    table = Table()
    table["id"] = star[keep]
    table["ra"] = u.Quantity(ra[star][keep], u.deg)
    table["dec"] = u.Quantity(dec[star][keep], u.deg)
    table["vlos"] = u.Quantity(obs.vlos[keep], u.km / u.s)
    table["vlos_err"] = u.Quantity(obs.err[keep], u.km / u.s)
    if obs.mjd is not None:
        table["mjd"] = obs.mjd[keep]
    return table


def _star_truth(pos, vel, xi, eta, v_true, obs, ellipticity, on_sky_ellipse=False):
    q = 1.0 - ellipticity
    # (x, y) already the image's major and minor axes, or the spherical model's projection
    r_ell = np.hypot(pos.x, pos.y / q) if on_sky_ellipse else pos.R / math.sqrt(q)
    return Table(
        {
            "id": np.arange(pos.r.size),
            "x": pos.x,
            "y": pos.y,
            "z": pos.z,
            "r": pos.r,
            "R": pos.R,
            "R_ell": r_ell,
            "xi": xi,
            "eta": eta,
            "v_r": vel.v_r,
            "v_theta": vel.v_theta,
            "v_phi": vel.v_phi,
            "vlos_true": v_true,
            "is_binary": obs.is_binary,
            "binary_period_days": obs.period_days,
            "binary_k_kms": obs.k_kms,
        }
    )


def _df_physical(choice):
    return None if choice.df is None else choice.df.is_physical


def _sky_phase_space(model, n_stars, rng, method, df_options, allow_unphysical, flattening):
    """Positions, velocities, the method choice, the flattening truth (or None) and the tangent-
    plane offsets xi, eta of the members."""
    sat = model.sat
    if flattening is None:
        pos, vel, choice = _phase_space(model, n_stars, rng, method, df_options, allow_unphysical)
        xi, eta = ellipse_offsets(pos.x, pos.y, sat.ellipticity, sat.position_angle_deg)
        return pos, vel, choice, None, xi, eta
    # already elliptical on the sky (x the major axis): rotated to the PA only
    pos, vel, choice, flat_truth = _flattened_phase_space(model, n_stars, rng, method, flattening)
    xi, eta = ellipse_offsets(pos.x, pos.y, 0.0, sat.position_angle_deg)
    return pos, vel, choice, flat_truth, xi, eta


def make_mock(
    satellite,
    dark=None,
    stellar_mass=None,
    anisotropy=None,
    n_stars=500,
    v_sys=0.0,
    error_range_kms=(1.0, 3.0),
    seed=0,
    method="auto",
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
    metallicity=None,
    flattening=None,
):
    """Mock velocity catalogue of a satellite with a known truth.

    Parameters
    ----------
    satellite : :class:`halo.inputs.satellite.Satellite` or a mapping of satellite-file keys;
        gives the centre, distance, major-axis half-light radius, ellipticity, position angle,
        light profile and (unless ``stellar_mass`` is given) the stellar mass
    dark : a dark profile from :mod:`halo.physics.dark`, or None for stars only
    stellar_mass : total stellar mass [Msun] (default: the satellite's central value)
    anisotropy : a model from :mod:`halo.physics.anisotropy` (default isotropic);
        ``method="df"`` takes isotropic and Osipkov-Merritt models only
    n_stars : number of stars
    v_sys : systemic velocity [km/s]
    error_range_kms : (low, high): each measurement's error is uniform in this range [km/s]
    seed : seed of the numpy Generator (the same seed gives the same catalogue); None draws a
        fresh one, recorded in the truth
    method : "auto" (default: "df" when the model has a non-negative distribution function,
        else "gaussian", see :func:`halo.mock.velocities.choose_method`), "df" (equilibrium
        distribution function, see :func:`halo.mock.distribution.distribution_function`;
        InputError when the model has none) or "gaussian" (approximate, see
        :func:`sample_velocities_gaussian`)
    epochs_mjd : None (one measurement per star, no ``mjd`` column) or a list of MJDs: each star is
        observed at every epoch with the same true velocity and independent errors
    velocity_offsets : optional callable ``(rng, star_index, mjd) -> offsets [km/s]`` (per row; mjd
        is None without epochs) added to the true velocities, e.g. binary orbital motion
    df_options : keyword arguments for :func:`halo.mock.distribution.distribution_function`
    allow_unphysical : with ``method="df"``, sample max(f, 0) when f < 0 somewhere instead of
        raising :class:`halo.core.errors.InputError` (``truth["df_physical"]`` records it; with
        ``"auto"`` such a model takes the Gaussians)
    repeat_fraction : with several epochs, the fraction of stars observed at every epoch (the
        others only at the first), chosen at random
    binary_fraction : fraction of the members that are binaries; each binary's orbit is drawn
        from ``binary_population`` (default :class:`halo.physics.binaries.BinaryPopulation`)
        orbit by orbit and its line-of-sight orbital velocity added at every epoch
        (t = mjd - first epoch)
    n_foreground : non-member stars added uniformly over a disc of ``field_radius_pc`` (default
        5 major-axis half-light radii), with velocities from ``foreground_components``: (offset
        from v_sys, sigma, weight) [km/s], default ((50, 40, 0.6), (-30, 90, 0.4)) (a broad
        two-component stand-in for a Galactic field, common practice)
    metallicity : None, or a :class:`halo.mock.metallicity.MockMetallicity`: ``feh`` and
        ``feh_err`` columns [dex] drawn from its own random stream (the kinematics stay as
        without it), ``truth["metallicity"]`` and the members' ``feh_true`` in ``stars``
    flattening : None (a spherical tracer), or the intrinsic axis ratio q <= 1 - e of an oblate
        tracer seen at the inclination that gives the satellite's ellipticity e, with Gaussian
        velocities from the axisymmetric Jeans equations in the spherical potential
        (:mod:`halo.mock.flattened`; a light profile the spherical fit does not assume);
        ``truth["flattening"]`` records q, the inclination and beta_z

    Returns
    -------
    :class:`MockCatalogue`: ``table`` with columns id, ra [deg], dec [deg], vlos [km/s], vlos_err
    [km/s] (and mjd), its ``meta["truth"]`` = ``truth``; ``truth`` with the input parameters, the
    light profile, r_1/2, M(<r_1/2) (3D, ``m_half_msun``) and its dark part
    (``dark_mass_half_msun``, as the fit outputs name it; also under its earlier name
    ``m_half_dark_msun``, kept for one version), the DF check (``df_physical``: None when no DF was
    computed), the requested ``method``, the ``method_used`` ("df" or "gaussian") and its
    ``method_reason`` (one line); ``stars`` with the per-star truth.

    Notes
    -----
    The spherical model uses the circularised half-light radius r_half sqrt(1 - e); positions are
    made elliptical by the area-preserving stretch described in the module notes, so the elliptical
    radii follow the light profile with the major-axis r_half and the circularised radii are the
    spherical model's projected radii. Observed vlos = v_sys + true vlos (+ offsets) + N(0, err).
    """
    model = _model(satellite, dark, stellar_mass, anisotropy)
    n_stars, err_range = _checked(method, error_range_kms, n_stars)
    sat = model.sat
    seed = int(np.random.SeedSequence().entropy) if seed is None else seed
    rng = np.random.default_rng(seed)
    pos, vel, choice, flat_truth, xi, eta = _sky_phase_space(
        model, n_stars, rng, method, df_options, allow_unphysical, flattening
    )
    v_true = line_of_sight_velocity(pos, vel)
    ra, dec = sky_coordinates(xi, eta, sat.ra_deg, sat.dec_deg, sat.distance_kpc)
    obs = observe_members(
        rng, v_true, v_sys, err_range, epochs_mjd, velocity_offsets=velocity_offsets,
        binary_fraction=binary_fraction, binary_population=binary_population,
        repeat_fraction=repeat_fraction,
    )  # fmt: skip
    settings = _settings_truth(
        seed=seed, method=method, n_stars=n_stars, v_sys=v_sys, error_range=err_range,
        epochs_mjd=epochs_mjd, velocity_offsets=velocity_offsets,
        repeat_fraction=repeat_fraction, binary_fraction=binary_fraction,
        binary_population=binary_population,
    )  # fmt: skip
    truth = {**settings, "method_used": choice.method, "method_reason": choice.reason}
    truth.update(n_binaries=int(obs.is_binary.sum()), **_model_truth(model, _df_physical(choice)))
    truth.update({} if flat_truth is None else {"flattening": flat_truth})
    table = _member_table(obs, ra, dec)
    if n_foreground > 0:
        table = with_foreground(
            table, truth, sat, int(n_foreground), rng, field_radius_pc=field_radius_pc,
            components=foreground_components, v_sys=v_sys, error_range=err_range,
            epochs_mjd=epochs_mjd, repeat_fraction=repeat_fraction, id0=n_stars,
        )  # fmt: skip
    table.meta["truth"] = truth
    stars = _star_truth(pos, vel, xi, eta, v_true, obs, sat.ellipticity, flattening is not None)
    if metallicity is not None:  # in place: the table keeps its meta
        table, stars["feh_true"] = with_metallicities(table, truth, n_stars, metallicity, seed)
    return MockCatalogue(table=table, truth=truth, stars=stars)
