"""The anisotropy of any spec chosen on the command line (``--anisotropy KIND``): the spec's own
anisotropy and its priors give way to KIND with the default priors below."""

import dataclasses

from halo.core.errors import InputError
from halo.inputs.spec import ANISOTROPY_PARAMETERS

__all__ = ["ANISOTROPY_PRIORS", "ANISOTROPY_CHOICES", "with_anisotropy", "check_anisotropy"]

_SYM = {"prior": "symmetrised-uniform", "low": -0.95, "high": 0.95}
_R_A = {
    "prior": "log-uniform",
    "low": 0.001,
    "high": 10.0,
    "unit": "kpc",
    "doc": "anisotropy radius (isotropic inside, radial outside)",
}

#: anisotropy kind -> default priors of its parameters (``--anisotropy KIND``). beta as in the
#: shipped specs: uniform in beta / (2 - beta) (common practice), i.e. beta from -38 to 0.97
ANISOTROPY_PRIORS = {
    "constant": {"beta": {**_SYM, "doc": "constant anisotropy, uniform in beta / (2 - beta)"}},
    "osipkov-merritt": {"r_a": _R_A},
    "baes-van-hese": {
        "beta_0": {**_SYM, "doc": "inner anisotropy, uniform in beta / (2 - beta)"},
        "beta_inf": {**_SYM, "doc": "outer anisotropy, uniform in beta / (2 - beta)"},
        "r_a": {**_R_A, "doc": "radius of the change from beta_0 to beta_inf"},
        "eta": {"prior": "uniform", "low": 0.5, "high": 4.0, "doc": "sharpness of the change"},
    },
}

#: the values of ``--anisotropy``: a kind, or "spec" for each spec's own
ANISOTROPY_CHOICES = (*ANISOTROPY_PRIORS, "spec")


def check_anisotropy(kind, option="--anisotropy"):
    """``kind`` (None for "spec" or not given); InputError for an unknown kind."""
    if kind is None or kind == "spec":
        return None
    if kind not in ANISOTROPY_PRIORS:
        raise InputError(f"{option}: expected one of {', '.join(ANISOTROPY_CHOICES)}, got {kind!r}")
    return kind


def with_anisotropy(spec, kind):
    """``spec`` with anisotropy ``kind`` and its default priors (the spec itself for None or its
    own kind)."""
    kind = check_anisotropy(kind)
    if kind is None or kind == spec.anisotropy:
        return spec
    params = {
        k: v for k, v in spec.parameters.items() if k not in ANISOTROPY_PARAMETERS[spec.anisotropy]
    }
    params.update({k: dict(v) for k, v in ANISOTROPY_PRIORS[kind].items()})
    return dataclasses.replace(
        spec,
        anisotropy=kind,
        parameters=params,
        description=f"{spec.description} [anisotropy replaced: {kind}]",
    )
