"""Physical constants and unit factors in the internal system (kpc, Msun, km/s).

Values are derived once at import from ``astropy.constants`` and ``astropy.units`` so that they
follow CODATA/IAU as astropy ships them; they are plain Python floats so that they can be used
inside JAX-traced code without astropy.
"""

import astropy.constants as _const
import astropy.units as _u

__all__ = [
    "G",
    "MSUN2_KPC5_TO_GEV2_CM5",
    "MSUN_KPC2_TO_GEV_CM2",
    "KPC_PER_PC",
    "DEG",
    "RHO_CRIT_UNIT",
]

#: Newton's constant [kpc (km/s)^2 / Msun]; about 4.300917e-6.
G = float(_const.G.to(_u.kpc * _u.km**2 / _u.s**2 / _u.Msun).value)

_msun_gev = float((_const.M_sun * _const.c**2).to(_u.GeV).value)
_kpc_cm = float(_u.kpc.to(_u.cm))

#: 1 Msun^2 kpc^-5 in GeV^2 cm^-5 (J-factor unit); about 4.44755e6.
MSUN2_KPC5_TO_GEV2_CM5 = _msun_gev**2 / _kpc_cm**5

#: 1 Msun kpc^-2 in GeV cm^-2 (D-factor unit); about 1.17148e14.
MSUN_KPC2_TO_GEV_CM2 = _msun_gev / _kpc_cm**2

#: kpc per pc.
KPC_PER_PC = 1.0e-3

#: radians per degree.
DEG = 3.141592653589793 / 180.0

#: unit used for critical densities [Msun / kpc^3].
RHO_CRIT_UNIT = _u.Msun / _u.kpc**3
