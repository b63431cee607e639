"""One ``[parameters.NAME]`` table of a model spec, checked whole: its keys, its prior kind and
values that the model can use (finite numbers, inside the parameter's range), so that a bad spec
is refused when it is read, never after a sampler has started."""

import math

from halo.core.errors import InputError
from halo.physics.concentration import CONCENTRATION_RELATIONS, SUBHALO_RELATIONS

__all__ = [
    "PRIORS",
    "PRIOR_OPTIONAL_KEYS",
    "POSITIVE_PARAMETERS",
    "BETA_PARAMETERS",
    "check_prior",
]

#: prior kind -> required keys
PRIORS = {
    "uniform": ("low", "high"),
    "log-uniform": ("low", "high"),
    "normal": ("mean", "sigma"),
    "symmetrised-uniform": ("low", "high"),
    "concentration": ("relation",),
    "fixed": ("value",),
}

#: prior kind -> keys it may carry besides ``prior``, ``unit``, ``doc`` and the required ones
PRIOR_OPTIONAL_KEYS = {"concentration": ("subhalo_relation",)}

#: parameters that must be positive whatever the model (a dark profile adds its own)
POSITIVE_PARAMETERS = ("m200", "c200", "rho_s", "r_s", "r_a", "stellar_mass", "eta")

#: anisotropies beta(r) = 1 - sigma_t^2 / sigma_r^2: at most 1 (radial orbits only)
BETA_PARAMETERS = ("beta", "beta_0", "beta_inf")

_FREE_TEXT = ("prior", "unit", "doc")


def _fail(source, pname, msg):
    raise InputError(f"{source}: parameter '{pname}': {msg}")


def _number(source, pname, p, key):
    v = p[key]
    if isinstance(v, bool) or not isinstance(v, int | float):
        _fail(source, pname, f"'{key}' must be a number, got {v!r}")
    return float(v)


def _check_keys(pname, p, kind, source):
    known = set(_FREE_TEXT) | set(PRIORS[kind]) | set(PRIOR_OPTIONAL_KEYS.get(kind, ()))
    for key in p:
        if key not in known:
            _fail(source, pname, f"unknown key '{key}' (known: {', '.join(sorted(known))})")
    for req in PRIORS[kind]:
        if req not in p:
            _fail(source, pname, f"prior '{kind}' needs '{req}'")


def _check_relations(pname, p, source):
    """``concentration``: on c200 only, with a field relation and (optionally) a subhalo one."""
    if pname != "c200":
        _fail(source, pname, "the 'concentration' prior is for c200 only")
    field = sorted(set(CONCENTRATION_RELATIONS) - SUBHALO_RELATIONS)
    if p["relation"] not in field:
        _fail(source, pname, f"relation must be one of {', '.join(field)}, got {p['relation']!r}")
    sub = p.get("subhalo_relation")
    if sub is not None and sub not in SUBHALO_RELATIONS:
        known = ", ".join(sorted(SUBHALO_RELATIONS))
        _fail(source, pname, f"subhalo_relation must be one of {known}, got {sub!r}")


def _support(kind, v):
    """(lowest, highest) value the prior can give the parameter."""
    if kind == "fixed":
        return v["value"], v["value"]
    if kind == "normal":
        return -math.inf, math.inf
    if kind == "symmetrised-uniform":
        return tuple(2.0 * b / (1.0 + b) if b > -1 else -math.inf for b in (v["low"], v["high"]))
    return v["low"], v["high"]


def _check_range(pname, kind, v, source, bounds):
    """The prior's values inside the parameter's range (``bounds``: positive / unit names)."""
    positive, unit_interval, may_be_inf = bounds
    if kind == "symmetrised-uniform":
        if pname not in BETA_PARAMETERS:
            _fail(source, pname, "the 'symmetrised-uniform' prior is for anisotropies only")
        if not (-1 < v["low"] and v["high"] <= 1):
            _fail(source, pname, "symmetrised-uniform bounds must lie in (-1, 1]")
    lo, hi = _support(kind, v)
    if pname in BETA_PARAMETERS and not (hi < 1 or (hi == 1 and kind != "fixed")):
        what = "a normal prior is unbounded" if kind == "normal" else f"values reach {hi:g}"
        _fail(source, pname, f"an anisotropy must be below 1 ({what})")
    if pname in positive and not (lo > 0 or (lo == 0 and kind == "uniform")):
        what = "a normal prior is unbounded" if kind == "normal" else f"values reach {lo:g}"
        _fail(source, pname, f"must be positive ({what})")
    if pname in unit_interval and not (0 <= lo and hi <= 1):
        _fail(source, pname, f"must lie in [0, 1] (prior reaches {lo:g} .. {hi:g})")
    if kind == "fixed" and math.isinf(lo) and not (pname in may_be_inf and lo > 0):
        _fail(source, pname, "fixed value must be finite")


def check_prior(pname, p, source, bounds=((), (), ())):
    """One parameter table: known keys, a known prior with finite values in the parameter's range.

    ``bounds``: (names that must be positive, names in [0, 1], names that may be fixed at +inf).
    """
    if not isinstance(p, dict) or "prior" not in p:
        raise InputError(f"{source}: parameter '{pname}' needs a table with a 'prior' key")
    kind = p["prior"]
    if kind not in PRIORS:
        _fail(source, pname, f"prior must be one of {', '.join(PRIORS)}, got {kind!r}")
    _check_keys(pname, p, kind, source)
    if kind == "concentration":
        _check_relations(pname, p, source)
        return
    v = {k: _number(source, pname, p, k) for k in PRIORS[kind]}
    for k, x in v.items():
        if math.isnan(x) or (math.isinf(x) and kind != "fixed"):
            _fail(source, pname, f"'{k}' must be finite, got {x}")
    if "low" in v and not v["low"] < v["high"]:
        _fail(source, pname, "need numbers with low < high")
    if kind == "log-uniform" and v["low"] <= 0:
        _fail(source, pname, "log-uniform needs low > 0")
    if kind == "normal" and not v["sigma"] > 0:
        _fail(source, pname, "normal prior needs sigma > 0")
    _check_range(pname, kind, v, source, bounds)
