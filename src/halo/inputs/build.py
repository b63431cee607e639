"""Turn a spec and parameter values into physics objects (dark halo, stars, light, anisotropy).

Used by ``halo predict`` (values from the command line) and by the sampler (values drawn from
the priors); all arithmetic is JAX so the result can be traced.
"""

import math

import jax.numpy as jnp

from halo.core.errors import InputError
from halo.inputs.spec import ANISOTROPY_PARAMETERS, dark_class
from halo.inputs.spec_priors import POSITIVE_PARAMETERS
from halo.physics.anisotropy import ANISOTROPIES
from halo.physics.mass import MassModel, Stars

__all__ = ["build_dark", "build_anisotropy", "build_mass_model", "check_values"]

#: anisotropy parameters that may be left out on the command line (isotropic default)
_ANIS_DEFAULTS = {"constant": {"beta": 0.0}}

#: parameter -> plausible range [Msun] of a satellite's halo and stars: values outside are refused
#: as slips (common practice: dwarf haloes up to ~1e11-1e12 Msun, the Milky Way's own ~1e12)
PLAUSIBLE_VALUES = {"m200": (1.0e2, 1.0e13), "stellar_mass": (1.0, 1.0e12)}


class _NoDark:
    """Stands for the profile class of a stars-only model: no shape parameters."""

    shape_parameters = ()
    optional = {}
    positive = ()
    unit_interval = ()


def check_values(spec, values, source="--set"):
    """Validate user-given parameter values for a spec (names, completeness, ranges).

    Returns the completed dict (defaults filled in). ``stellar_mass`` is always allowed.
    """
    allowed = spec.allowed_names() | {"stellar_mass"}
    for k in values:
        if k not in allowed:
            raise InputError(
                f"{source}: unknown parameter '{k}' for model '{spec.name}' "
                f"(allowed: {', '.join(sorted(allowed))})"
            )
    out = dict(_ANIS_DEFAULTS.get(spec.anisotropy, {}))
    out.update(values)
    dark = dark_class(spec.dark_profile) if spec.has_dark else _NoDark
    if spec.has_dark:
        forms = [f for f in (("m200", "c200"), ("rho_s", "r_s")) if f[0] in out or f[1] in out]
        if len(forms) != 1 or not all(k in out for k in forms[0]):
            raise InputError(
                f"{source}: give the halo as m200 and c200, or as rho_s and r_s "
                f"(model '{spec.name}')"
            )
        for s in dark.shape_parameters:
            if s not in out and s not in dark.optional:
                raise InputError(f"{source}: missing parameter '{s}' for model '{spec.name}'")
    for a in ANISOTROPY_PARAMETERS[spec.anisotropy]:
        if a not in out:
            raise InputError(f"{source}: missing parameter '{a}' for model '{spec.name}'")
    positive = set(POSITIVE_PARAMETERS) | set(dark.positive)
    for k, v in out.items():
        if not math.isfinite(v) and not (v == math.inf and dark.optional.get(k) == math.inf):
            raise InputError(f"{source}: parameter '{k}' must be finite, got {v}")
        if k in positive and v <= 0:
            raise InputError(f"{source}: parameter '{k}' must be positive, got {v}")
    for k, (lo, hi) in PLAUSIBLE_VALUES.items():
        if k in out and not lo <= out[k] <= hi:
            raise InputError(
                f"{source}: parameter '{k}' = {out[k]:g} is outside the plausible range "
                f"{lo:g} to {hi:g} Msun"
            )
    for k in ("beta", "beta_0", "beta_inf"):
        if k in out and out[k] >= 1:
            raise InputError(f"{source}: anisotropy '{k}' must be < 1, got {out[k]}")
    for k in dark.unit_interval:
        if k in out and not 0 <= out[k] <= 1:
            raise InputError(f"{source}: parameter '{k}' must be in [0, 1], got {out[k]}")
    return out


def build_dark(spec, values, rho_c):
    """The dark profile for parameter ``values`` (dict of floats or JAX scalars), or None.

    ``rho_c`` [Msun kpc^-3] is the critical density used for (m200, c200).
    """
    if not spec.has_dark:
        return None
    cls = dark_class(spec.dark_profile)
    shape = {}
    for s in cls.shape_parameters:
        if s in values:
            shape[cls.field_names.get(s, s)] = values[s]
        elif s in cls.optional:
            shape[cls.field_names.get(s, s)] = cls.optional[s]
    if "m200" in values:
        return cls.from_m200_c200(values["m200"], values["c200"], rho_c=rho_c, **shape)
    return cls(rho_s=values["rho_s"], r_s=values["r_s"], **shape)


def build_anisotropy(spec, values):
    cls = ANISOTROPIES[spec.anisotropy]
    if spec.anisotropy == "constant":
        return cls(values["beta"])
    return cls(*(values[k] for k in ANISOTROPY_PARAMETERS[spec.anisotropy]))


def build_mass_model(spec, values, light, rho_c):
    """(mass model, dark profile or None): the halo (if any) plus stars following ``light``."""
    dark = build_dark(spec, values, rho_c)
    stars = Stars(light, jnp.asarray(values["stellar_mass"], dtype=jnp.float64))
    comps = (stars,) if dark is None else (dark, stars)
    return MassModel(comps), dark
