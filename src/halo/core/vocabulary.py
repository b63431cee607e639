"""One vocabulary for names and output keys shared across stages.

Every module that writes or reads these keys imports them from here, so that a name means one
thing everywhere (summary.json, the ECSV tables, the reports, the workspace record).
"""

__all__ = [
    "QUANTILE_KEYS",
    "ESTIMATOR_NAMES",
    "ESTIMATOR_KEY_SUFFIX",
    "estimator_key",
    "STANDARD_ANGLES",
    "ANGLE_2RH",
    "ANGLE_2RH_CONVENTION",
    "HALO_TRUNCATION",
    "jacobi_truncation_text",
    "JD_CONVENTIONS",
    "angle_key",
    "angle_keys",
    "STARS_ONLY",
    "DEFAULT_MODELS",
    "M_SUN_V",
    "DEFAULT_N_ORBITS",
    "luminosity_v",
]

#: the quantile summary "Q" of the design notes, in the order the tables print it
QUANTILE_KEYS = ("median", "p16", "p84", "p2.5", "p97.5", "mean", "std")

#: closed-form mass estimators, by author and year (Walker et al. 2009, Wolf et al. 2010,
#: Errani et al. 2018); summary.json keys are these names + "_msun"
ESTIMATOR_NAMES = ("walker2009", "wolf2010", "errani2018")
ESTIMATOR_KEY_SUFFIX = "_msun"


def estimator_key(name):
    """summary.json key of an estimator's mass, e.g. ``walker2009_msun``."""
    return f"{name}{ESTIMATOR_KEY_SUFFIX}"


#: cone half-angles [deg] at which J and D are always reported
STANDARD_ANGLES = (0.1, 0.2, 0.5)

#: key of the J and D factors inside twice the half-light radius seen from the satellite's distance
ANGLE_2RH = "2rh"

#: what "2rh" means: twice the projected half-light radius, as in the J-factor literature (e.g.
#: Walker et al. 2011, ApJ 733, L46: J inside 2 r_h / D, r_h projected [memory]), circularised
#: like the models
ANGLE_2RH_CONVENTION = (
    "2rh: cone half-angle 2 R_e / distance, R_e the circularised projected half-light radius "
    "r_half * sqrt(1 - ellipticity) (r_half from the satellite file, projected, major axis), each "
    "posterior draw with its own R_e and distance"
)

#: the statement of untruncated haloes: ``halo predict``, and fits run with
#: --no-tidal-truncation or without a tidal field (a fit states its own choice per run,
#: summary.json ``jd_conventions.halo_truncation``, see halo.results.truncation)
HALO_TRUNCATION = (
    "J and D are computed for untruncated dark haloes: no tidal radius, the line-of-sight "
    "integrals run to infinity. A tidally truncated halo gives lower values, most at wide angles "
    "and for D."
)


def jacobi_truncation_text(milky_way_model, judged_at):
    """The statement of J and D truncated at each draw's Jacobi radius (a fit's default)."""
    return (
        "J and D are computed for dark haloes truncated at each posterior draw's own Jacobi "
        "radius r_J (density zero beyond r_J; r_J = (G M(<r_J) / (Omega^2 - d2Phi/dr2))^(1/3), "
        f"Binney & Tremaine 2008 section 8.3) in the Milky Way model {milky_way_model}, tides "
        f"judged at the {judged_at}; *_untruncated: the same draws without truncation."
    )


#: the conventions of untruncated J and D (``halo predict``; a fit writes its own statement)
JD_CONVENTIONS = {"2rh": ANGLE_2RH_CONVENTION, "halo_truncation": HALO_TRUNCATION}


def angle_key(angle_deg):
    """Output key of a cone half-angle in degrees: 0.1 -> "0.1"."""
    return f"{float(angle_deg):g}"


def angle_keys(angles=STANDARD_ANGLES, with_2rh=True):
    """Keys of the J/D entries: the standard angles, then "2rh"."""
    keys = [angle_key(a) for a in angles]
    return keys + [ANGLE_2RH] if with_2rh else keys


#: the comparison model with no dark matter (mass follows light)
STARS_ONLY = "stars-only"

#: models fitted when the user names none
DEFAULT_MODELS = ("nfw", "cored", STARS_ONLY)

#: absolute V magnitude of the Sun, the value in common use (common practice; e.g. Binney &
#: Merrifield 1998, table 2.1 [memory])
M_SUN_V = 4.83

#: orbits drawn per multi-epoch star for the binary terms of the likelihood
DEFAULT_N_ORBITS = 20_000


def luminosity_v(absolute_magnitude_v):
    """V-band luminosity [Lsun] of an absolute V magnitude: 10^(-0.4 (M_V - M_sun,V))."""
    return 10.0 ** (-0.4 * (absolute_magnitude_v - M_SUN_V))
