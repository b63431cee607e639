"""The satellite description file (TOML): centre, distance, size, shape, light, stellar mass.

The keys are a contract (see the project's design notes); unknown keys, missing required keys and
non-physical values raise :class:`halo.core.errors.InputError` with one line naming the file and
key. A light profile's shape parameters come from the keys its class declares
(``satellite_keys``, e.g. ``king_concentration`` for the King profile). ``age_gyr`` (0-14 Gyr)
with ``age_err_gyr``, ``galactocentric_distance_kpc`` and the systemic proper motion
(``pm_ra_cosdec_masyr`` and ``pm_dec_masyr``, given together, with their errors) feed the tides
and survival section (:mod:`halo.results.nature`).
"""

import dataclasses
import math
import tomllib
from pathlib import Path

from halo.core import vocabulary
from halo.core.errors import InputError
from halo.core.fileio import read_input_text
from halo.physics.light import LIGHT_PROFILES
from halo.physics.milky_way import MILKY_WAY_MODELS

__all__ = ["Satellite", "read_satellite", "parse_satellite"]

#: key -> (type, required, check, description)
_POSITIVE = ("positive", lambda v: v > 0)
_NONNEG = ("non-negative", lambda v: v >= 0)
_ANY = ("finite", lambda v: True)
#: a satellite's systemic proper motion: |mu| < 100 mas/yr (4.74 km/s per mas/yr per kpc: 470
#: km/s at 1 kpc, beyond any bound orbit)
_PM = ("between -100 and 100 (mas/yr)", lambda v: -100 < v < 100)

_KEYS = {
    "name": (str, True, None),
    "ra_deg": (float, True, ("between 0 and 360", lambda v: 0 <= v < 360)),
    "dec_deg": (float, True, ("between -90 and 90", lambda v: -90 <= v <= 90)),
    "distance_kpc": (float, True, _POSITIVE),
    "distance_err_kpc": (float, False, _NONNEG),
    "r_half_pc": (float, True, _POSITIVE),
    "r_half_err_pc": (float, False, _NONNEG),
    "ellipticity": (float, False, ("in [0, 1)", lambda v: 0 <= v < 1)),
    "position_angle_deg": (float, False, ("between -360 and 360", lambda v: -360 <= v <= 360)),
    "light_profile": (str, False, None),
    "king_concentration": (float, False, ("greater than 1", lambda v: v > 1)),
    "stellar_mass_msun": (float, False, _POSITIVE),
    "stellar_mass_err_msun": (float, False, _NONNEG),
    "absolute_magnitude_v": (float, False, ("between -25 and 5", lambda v: -25 < v < 5)),
    "absolute_magnitude_v_err": (float, False, _NONNEG),
    "stellar_ml_v": (list, False, None),
    "galactocentric_distance_kpc": (float, False, _POSITIVE),
    "age_gyr": (float, False, ("between 0 and 14", lambda v: 0 < v <= 14)),
    "age_err_gyr": (float, False, _NONNEG),
    "pm_ra_cosdec_masyr": (float, False, _PM),
    "pm_ra_cosdec_err_masyr": (float, False, _NONNEG),
    "pm_dec_masyr": (float, False, _PM),
    "pm_dec_err_masyr": (float, False, _NONNEG),
    "milky_way_model": (str, False, None),
    "foreground": (list, False, None),
    "v_sys_kms": (float, False, ("between -2000 and 2000", lambda v: -2000 < v < 2000)),
    "v_sys_err_kms": (float, False, _NONNEG),
}


@dataclasses.dataclass(frozen=True)
class Satellite:
    """A satellite as described by the user (values as in the file, units in the key names)."""

    name: str
    ra_deg: float
    dec_deg: float
    distance_kpc: float
    r_half_pc: float
    distance_err_kpc: float = 0.0
    r_half_err_pc: float = 0.0
    ellipticity: float = 0.0
    position_angle_deg: float = 0.0
    light_profile: str = "plummer"
    king_concentration: float | None = None
    stellar_mass_msun: float | None = None
    stellar_mass_err_msun: float = 0.0
    absolute_magnitude_v: float | None = None
    absolute_magnitude_v_err: float = 0.0
    stellar_ml_v: tuple | None = None
    galactocentric_distance_kpc: float | None = None
    age_gyr: float | None = None
    age_err_gyr: float | None = None  # None: no error given (taken as 0)
    pm_ra_cosdec_masyr: float | None = None
    pm_ra_cosdec_err_masyr: float | None = None
    pm_dec_masyr: float | None = None
    pm_dec_err_masyr: float | None = None
    milky_way_model: str | None = None  # None: the default (halo.physics.milky_way)
    foreground: tuple | None = None
    v_sys_kms: float | None = None
    v_sys_err_kms: float | None = None
    source: str = dataclasses.field(default="<memory>", compare=False)

    @property
    def r_half_circ_kpc(self):
        """Circularised projected half-light radius r_half sqrt(1 - e) [kpc] (design notes)."""
        return self.r_half_pc * 1e-3 * math.sqrt(1.0 - self.ellipticity)

    @property
    def luminosity_v(self):
        """V-band luminosity [Lsun], 10^(-0.4 (M_V - M_sun,V)), M_sun,V = 4.83; None without M_V."""
        if self.absolute_magnitude_v is None:
            return None
        return vocabulary.luminosity_v(self.absolute_magnitude_v)

    def stellar_mass_prior(self):
        """(median, sigma) of the stellar mass [Msun] in the form the file gives.

        With the magnitude form, the M/L range midpoint times L, with the half-range as sigma.
        """
        if self.stellar_mass_msun is not None:
            return self.stellar_mass_msun, self.stellar_mass_err_msun
        lo, hi = self.stellar_ml_v
        lum = self.luminosity_v
        return 0.5 * (lo + hi) * lum, 0.5 * (hi - lo) * lum

    def light(self, r_half_kpc=None):
        """The light profile (:mod:`halo.physics.light`) at the circularised or the given radius.

        Its shape parameters are read from the keys the profile class declares.
        """
        r = self.r_half_circ_kpc if r_half_kpc is None else r_half_kpc
        cls = LIGHT_PROFILES[self.light_profile]
        shape = (getattr(self, cls.satellite_keys[p]) for p in cls.shape_parameters)
        return cls.from_r_half(r, *shape)

    def as_dict(self):
        d = dataclasses.asdict(self)
        d.pop("source")
        if d["stellar_ml_v"] is not None:
            d["stellar_ml_v"] = list(d["stellar_ml_v"])
        if d["foreground"] is not None:
            d["foreground"] = [
                {"mean_kms": m, "sigma_kms": s, "weight": w} for m, s, w in d["foreground"]
            ]
        return {k: v for k, v in d.items() if v is not None}


def _foreground(items, where):
    """[[foreground]] tables -> ((mean_kms, sigma_kms, weight), ...)."""
    if not isinstance(items, list) or not items:
        raise InputError(
            f"{where} key 'foreground' must be a list of tables with mean_kms, sigma_kms, weight"
        )
    out = []
    for k, item in enumerate(items, 1):
        if not isinstance(item, dict):
            raise InputError(f"{where} foreground component {k} must be a table")
        unknown = set(item) - {"mean_kms", "sigma_kms", "weight"}
        if unknown:
            raise InputError(
                f"{where} foreground component {k}: unknown key '{sorted(unknown)[0]}' "
                "(known: mean_kms, sigma_kms, weight)"
            )
        vals = []
        for key, default in (("mean_kms", None), ("sigma_kms", None), ("weight", 1.0)):
            v = item.get(key, default)
            if v is None:
                raise InputError(f"{where} foreground component {k}: missing key '{key}'")
            if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
                raise InputError(f"{where} foreground component {k}: '{key}' must be a number")
            if key != "mean_kms" and v <= 0:
                raise InputError(f"{where} foreground component {k}: '{key}' must be positive")
            vals.append(float(v))
        out.append(tuple(vals))
    return tuple(out)


#: key -> (lowest, highest, hint): values outside are refused as a likely slip of units. The range
#: spans the Milky Way's and the Local Group's satellites and star clusters with room to spare
#: (common practice; distances of Local Group dwarfs reach ~1.5 Mpc [memory])
PLAUSIBLE = {
    "distance_kpc": (1.0, 5000.0, "kpc, not pc"),
    "galactocentric_distance_kpc": (1.0, 5000.0, "kpc, not pc"),
    "r_half_pc": (0.1, 20000.0, "pc, not kpc"),
    "stellar_mass_msun": (1.0, 1.0e12, "Msun"),
}


def _check_plausible(values, where):
    for key, (lo, hi, hint) in PLAUSIBLE.items():
        v = values.get(key)
        if v is not None and not lo <= v <= hi:
            raise InputError(
                f"{where} key '{key}' = {v:g} is outside the plausible range {lo:g} to {hi:g} "
                f"({hint})"
            )


def _check_stellar_mass(values, where):
    """The stellar mass given once: as stellar_mass_msun, or as absolute_magnitude_v with
    stellar_ml_v."""
    has_mass = "stellar_mass_msun" in values
    has_mag = "absolute_magnitude_v" in values
    if has_mass and "stellar_ml_v" in values:  # else the M/L range would be silently ignored
        raise InputError(
            f"{where} keys 'stellar_mass_msun' and 'absolute_magnitude_v' with 'stellar_ml_v' "
            "both give the stellar mass: keep one (absolute_magnitude_v alone, without "
            "stellar_ml_v, gives the luminosity for M/L)"
        )
    if not has_mass and not has_mag:
        raise InputError(
            f"{where} give the stellar mass as 'stellar_mass_msun' or as 'absolute_magnitude_v' "
            "with 'stellar_ml_v'"
        )
    if has_mag and not has_mass and "stellar_ml_v" not in values:
        raise InputError(f"{where} key 'stellar_ml_v' is required with 'absolute_magnitude_v'")


#: (key needed, key that needs it)
_NEEDS = (
    ("v_sys_kms", "v_sys_err_kms"),
    ("age_gyr", "age_err_gyr"),
    ("pm_ra_cosdec_masyr", "pm_ra_cosdec_err_masyr"),
    ("pm_dec_masyr", "pm_dec_err_masyr"),
    ("pm_dec_masyr", "pm_ra_cosdec_masyr"),
    ("pm_ra_cosdec_masyr", "pm_dec_masyr"),
)


def parse_satellite(data, source="<memory>"):
    """Validate a mapping of satellite keys and return a :class:`Satellite`."""
    where = f"{source}:"
    for key in data:
        if key not in _KEYS:
            raise InputError(f"{where} unknown key '{key}' (known: {', '.join(_KEYS)})")
    values = {}
    for key, (kind, required, check) in _KEYS.items():
        if key not in data:
            if required:
                raise InputError(f"{where} missing required key '{key}'")
            continue
        v = data[key]
        if kind is float:
            if isinstance(v, bool) or not isinstance(v, int | float):
                raise InputError(f"{where} key '{key}' must be a number, got {v!r}")
            v = float(v)
            if not math.isfinite(v):
                raise InputError(f"{where} key '{key}' must be finite, got {v!r}")
        elif kind is str and not isinstance(v, str):
            raise InputError(f"{where} key '{key}' must be a string, got {v!r}")
        if check is not None:
            text, ok = check
            if not ok(v):
                raise InputError(f"{where} key '{key}' must be {text}, got {v!r}")
        values[key] = v
    if "milky_way_model" in values:
        mw = values["milky_way_model"].lower()
        if mw not in MILKY_WAY_MODELS:
            raise InputError(
                f"{where} key 'milky_way_model' must be one of {', '.join(MILKY_WAY_MODELS)}, "
                f"got {values['milky_way_model']!r}"
            )
        values["milky_way_model"] = mw
    prof = values.get("light_profile", "plummer")
    if prof not in LIGHT_PROFILES:
        raise InputError(
            f"{where} key 'light_profile' must be one of {', '.join(LIGHT_PROFILES)}, got {prof!r}"
        )
    for key in LIGHT_PROFILES[prof].satellite_keys.values():
        if key not in values:
            raise InputError(f"{where} key '{key}' is required with light_profile = '{prof}'")
    if "stellar_ml_v" in values:
        ml = values["stellar_ml_v"]
        ok = (
            len(ml) == 2
            and all(isinstance(x, int | float) and not isinstance(x, bool) for x in ml)
            and 0 < ml[0] <= ml[1]
        )
        if not ok:
            raise InputError(f"{where} key 'stellar_ml_v' must be [low, high] with 0 < low <= high")
        values["stellar_ml_v"] = (float(ml[0]), float(ml[1]))
    if "foreground" in values:
        values["foreground"] = _foreground(values["foreground"], where)
    _check_plausible(values, where)
    _check_stellar_mass(values, where)
    for needs, key in _NEEDS:
        if key in values and needs not in values:
            raise InputError(f"{where} key '{key}' needs '{needs}'")
    return Satellite(**values, source=str(source))


def read_satellite(path):
    """Read and validate a satellite TOML file."""
    path = Path(path)
    text = read_input_text(path)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{path}: malformed TOML ({exc})") from None
    return parse_satellite(data, source=path)
