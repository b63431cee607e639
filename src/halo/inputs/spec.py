"""Model specs: TOML files naming a dark profile, an anisotropy kind and the priors.

A spec (shipped in ``halo/models/*.toml``, or any file the user names) holds::

    description = "..."
    dark_profile = "nfw"            # a name in halo.physics.dark.DARK_PROFILES, or "none"
    anisotropy = "constant"         # constant | osipkov-merritt | baes-van-hese
    [parameters.NAME]               # one table per free parameter of the model
    prior = "log-uniform"           # see PRIORS
    low = 1.0e5
    high = 1.0e11
    unit = "Msun"                   # optional, free text
    doc = "..."                     # optional, free text

The dark halo is parametrised either by ``m200`` and ``c200`` or by ``rho_s`` and ``r_s``, plus
the shape parameters its profile class declares (``shape_parameters``, ``optional``; see
:class:`halo.physics.dark_base.DarkProfile`). Every model also carries the stars (mass follows
the light, stellar mass from the satellite file), the systemic velocity, and the distance and
half-light radius as nuisance parameters: those are not listed in the spec.
"""

import dataclasses
import math
import tomllib
from importlib import resources
from pathlib import Path

from halo.core.errors import InputError
from halo.core.fileio import read_input_text
from halo.inputs.spec_priors import POSITIVE_PARAMETERS, PRIORS, check_prior
from halo.physics.anisotropy import ANISOTROPIES
from halo.physics.dark import DARK_PROFILES

__all__ = [
    "ModelSpec",
    "load_spec",
    "available_specs",
    "PRIORS",
    "ANISOTROPY_PARAMETERS",
    "dark_class",
]

#: anisotropy kind -> its parameters by spec / command-line names
ANISOTROPY_PARAMETERS = {
    "constant": ("beta",),
    "osipkov-merritt": ("r_a",),
    "baes-van-hese": ("beta_0", "beta_inf", "r_a", "eta"),
}

_HALO_FORMS = (("m200", "c200"), ("rho_s", "r_s"))


def dark_class(dark_profile):
    """The profile class of a spec's ``dark_profile`` name (it declares the shape parameters)."""
    return DARK_PROFILES[dark_profile]


@dataclasses.dataclass(frozen=True)
class ModelSpec:
    name: str
    description: str
    dark_profile: str
    anisotropy: str
    parameters: dict
    source: str
    binaries: dict = dataclasses.field(default_factory=dict)

    def binary_population(self):
        """The :class:`halo.physics.binaries.BinaryPopulation` of the ``[binaries]`` table."""
        from halo.physics.binaries import BinaryPopulation

        b = dict(self.binaries)
        b.pop("fraction", None)
        periods = b.pop("periods", "raghavan10")
        if periods == "duquennoy91":
            return BinaryPopulation.duquennoy_mayor91(**b)
        return BinaryPopulation(**b)

    @property
    def binary_fraction_range(self):
        """(low, high) of the uniform prior on the binary fraction (default (0, 1))."""
        return tuple(self.binaries.get("fraction", (0.0, 1.0)))

    @property
    def has_dark(self):
        return self.dark_profile != "none"

    @property
    def halo_form(self):
        """("m200", "c200") or ("rho_s", "r_s"), as the spec's priors parametrise the halo."""
        for form in _HALO_FORMS:
            if form[0] in self.parameters:
                return form
        return None

    def allowed_names(self):
        """All parameter names this model accepts (spec or command line)."""
        names = set(ANISOTROPY_PARAMETERS[self.anisotropy])
        if self.has_dark:
            shape = dark_class(self.dark_profile).shape_parameters
            names |= {"m200", "c200", "rho_s", "r_s"} | set(shape)
        return names


def _spec_error(source, msg):
    return InputError(f"{source}: {msg}")


def _check_header(data, source):
    """Known top-level keys, and the dark profile and anisotropy names."""
    known = {"description", "dark_profile", "anisotropy", "parameters", "binaries"}
    for key in data:
        if key not in known:
            raise _spec_error(source, f"unknown key '{key}' (known: {', '.join(sorted(known))})")
    for key in ("dark_profile", "anisotropy"):
        if key not in data:
            raise _spec_error(source, f"missing required key '{key}'")
    dark = data["dark_profile"]
    if dark != "none" and dark not in DARK_PROFILES:
        raise _spec_error(
            source,
            f"dark_profile must be 'none' or one of {', '.join(DARK_PROFILES)}, got {dark!r}",
        )
    anis = data["anisotropy"]
    if anis not in ANISOTROPIES:
        raise _spec_error(
            source, f"anisotropy must be one of {', '.join(ANISOTROPIES)}, got {anis!r}"
        )


def _bounds(spec):
    """(positive, unit-interval, may-be-infinite) parameter names of the spec's model."""
    if not spec.has_dark:
        return POSITIVE_PARAMETERS, (), ()
    cls = dark_class(spec.dark_profile)
    inf = tuple(k for k, v in cls.optional.items() if v == math.inf)
    return POSITIVE_PARAMETERS + tuple(cls.positive), tuple(cls.unit_interval), inf


def _check_complete(spec, params, source):
    """Every model parameter has a prior (the halo in exactly one of its two forms)."""
    missing = [a for a in ANISOTROPY_PARAMETERS[spec.anisotropy] if a not in params]
    if spec.has_dark:
        forms = [f for f in _HALO_FORMS if f[0] in params or f[1] in params]
        if len(forms) != 1 or not all(k in params for k in forms[0]):
            raise _spec_error(
                source, "the halo needs priors on exactly one of (m200, c200) or (rho_s, r_s)"
            )
        cls = dark_class(spec.dark_profile)
        missing += [s for s in cls.shape_parameters if s not in params and s not in cls.optional]
    if missing:
        raise _spec_error(source, f"missing prior for parameter(s) {', '.join(missing)}")


def parse_spec(data, name, source):
    """A :class:`ModelSpec` from parsed TOML ``data``; InputError naming ``source`` if invalid."""
    _check_header(data, source)
    dark, anis = data["dark_profile"], data["anisotropy"]
    params = data.get("parameters", {})
    if not isinstance(params, dict):
        raise _spec_error(source, "'parameters' must be a table of parameter tables")
    spec = ModelSpec(
        name=name,
        description=str(data.get("description", "")),
        dark_profile=dark,
        anisotropy=anis,
        parameters={},
        source=str(source),
    )
    allowed = spec.allowed_names()
    for pname, p in params.items():
        if pname not in allowed:
            raise _spec_error(
                source,
                f"parameter '{pname}' is not a parameter of a {dark} halo with {anis} anisotropy "
                f"(allowed: {', '.join(sorted(allowed))})",
            )
        check_prior(pname, p, source, _bounds(spec))
    _check_complete(spec, params, source)
    binaries = _binaries(data.get("binaries", {}), source)
    return dataclasses.replace(spec, parameters=dict(params), binaries=binaries)


#: [binaries] keys -> check
BINARY_KEYS = {
    "periods": "'raghavan10' or 'duquennoy91' (log-normal period distribution)",
    "m1_msun": "primary (observed star) mass [Msun]",
    "r1_rsun": "primary radius [Rsun]",
    "q_min": "lowest mass ratio",
    "q_max": "highest mass ratio",
    "e_max": "highest eccentricity",
    "p_circular_days": "orbits with shorter periods are circular [day]",
    "log_period_mean": "mean of log10(P / day)",
    "log_period_sigma": "width of log10(P / day)",
    "fraction": "[low, high] of the uniform prior on the binary fraction",
}


def _binaries(table, source):
    """Validate the optional [binaries] table of a spec (orbit population and fraction prior)."""
    if not isinstance(table, dict):
        raise _spec_error(source, "'binaries' must be a table")
    out = {}
    for key, v in table.items():
        if key not in BINARY_KEYS:
            raise _spec_error(
                source, f"[binaries] unknown key '{key}' (known: {', '.join(BINARY_KEYS)})"
            )
        if key == "periods":
            if v not in ("raghavan10", "duquennoy91"):
                raise _spec_error(source, f"[binaries] periods: {BINARY_KEYS[key]}, got {v!r}")
        elif key == "fraction":
            ok = (
                isinstance(v, list)
                and len(v) == 2
                and all(isinstance(x, int | float) and not isinstance(x, bool) for x in v)
                and 0 <= v[0] < v[1] <= 1
            )
            if not ok:
                raise _spec_error(source, "[binaries] fraction must be [low, high] in [0, 1]")
            v = (float(v[0]), float(v[1]))
        else:
            if isinstance(v, bool) or not isinstance(v, int | float):
                raise _spec_error(source, f"[binaries] {key} must be a number")
            v = float(v)
            if key != "log_period_mean" and v <= 0:
                raise _spec_error(source, f"[binaries] {key} must be positive")
        out[key] = v
    q_lo, q_hi = out.get("q_min", 0.1), out.get("q_max", 1.0)
    if not q_lo < q_hi:
        raise _spec_error(source, "[binaries] needs q_min < q_max")
    if not out.get("e_max", 0.9) < 1:
        raise _spec_error(source, "[binaries] e_max must be below 1")
    return out


def available_specs():
    """Names of the specs shipped with halo (sorted)."""
    folder = resources.files("halo.models")
    return sorted(p.name[:-5] for p in folder.iterdir() if p.name.endswith(".toml"))


def load_spec(name_or_path):
    """A :class:`ModelSpec` from a shipped name (``nfw``, in any case: ``NFW``; the spec keeps
    the shipped spelling) or a path to a TOML file (a path is never matched by case)."""
    text = None
    candidate = Path(str(name_or_path))
    if candidate.suffix == ".toml" or candidate.exists():
        if candidate.exists() and not candidate.is_file():
            raise InputError(f"{candidate}: not a model spec file")
        name, source = candidate.stem, candidate
        text = read_input_text(candidate, missing="no such model spec file")
    else:
        shipped = available_specs()
        name = str(name_or_path)
        if name not in shipped:  # a shipped name in any case: `--model NFW` is nfw
            name = next((s for s in shipped if s.casefold() == name.casefold()), name)
        if name not in shipped:
            raise InputError(
                f"unknown model '{name}' (available: {', '.join(shipped)}; "
                "or give a path to a .toml spec)"
            )
        source = f"models/{name}.toml"
        text = resources.files("halo.models").joinpath(f"{name}.toml").read_text(encoding="utf-8")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{source}: malformed TOML ({exc})") from None
    return parse_spec(data, name, source)
