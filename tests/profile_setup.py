"""Example parameters of every registered dark and light profile, for the table-driven tests.

Adding a profile to ``halo.physics.dark.DARK_PROFILES`` or ``halo.physics.light.LIGHT_PROFILES``
takes rows here and nothing else in the tests: the suites (tests/test_profile_suite.py,
tests/test_profile_suite_light.py, the "all dark profiles" tests of tests/test_dark.py) run on
every row, and ``test_every_registered_profile_has_examples`` fails for a profile without them.
"""

#: dark profile name -> {example id: constructor keywords} (kpc, Msun kpc^-3). Truncated variants
#: of every profile are also covered by tests/test_dark.py::test_truncation_and_centre.
DARK_EXAMPLES = {
    "nfw": {
        "cusp": dict(rho_s=2.0e7, r_s=0.8),
        "truncated": dict(rho_s=2.0e7, r_s=0.8, r_t=2.7),
    },
    "burkert": {"truncated": dict(rho_s=5.0e7, r_s=0.5, r_t=1.6)},
    "core-nfw": {"partial": dict(rho_s=1.0e7, r_s=1.2, r_c=0.3, n=0.7)},
    "zhao": {
        "steep": dict(rho_s=1.0e7, r_s=0.9, alpha=2.0, beta=5.0, gamma=0.5),
        "cuspy-truncated": dict(rho_s=3.0e6, r_s=1.1, alpha=0.7, beta=3.5, gamma=1.4, r_t=3.9),
    },
    "einasto": {"cdm": dict(rho_s=3.0e6, r_s=1.5, alpha=0.17)},
}

#: dark profile name -> one example of its shape fields (constructor names, r_t left out), for the
#: (M200, c200), log-slope and truncation tests of tests/test_dark*.py
DARK_SHAPES = {
    "nfw": {},
    "burkert": {},
    "core-nfw": {"r_c": 0.4, "n": 0.8},
    "zhao": {"alpha": 2.0, "beta": 5.0, "gamma": 0.5},
    "einasto": {"alpha": 0.17},
}

#: light profile name -> {example id: constructor keywords} (kpc); entries for names not (yet) in
#: LIGHT_PROFILES are ignored, the registry test is what enforces coverage. The first example of
#: each profile also builds the Stars case of tests/test_profile_suite.py.
LIGHT_EXAMPLES = {
    "plummer": {"a30pc": dict(a=0.03)},
    "exponential": {"rd25pc": dict(r_d=0.025), "rd20pc": dict(r_d=0.02)},
    "king": {
        "c10": dict(r_c=0.02, r_t=0.2),
        "c8": dict(r_c=0.01, r_t=0.08),
        "c100": dict(r_c=0.002, r_t=0.2),
    },
}

#: light profile name -> the shape parameters of its ``from_r_half`` (by the names the class
#: declares in ``shape_parameters``), for the from_r_half tests
LIGHT_SHAPES = {"plummer": {}, "exponential": {}, "king": {"concentration": 6.0}}

#: mass models (dark name, dark example, light name, light example): a halo plus stars
MODEL_EXAMPLES = [
    ("zhao", "steep", "plummer", "a30pc"),
    ("nfw", "truncated", "plummer", "a30pc"),
]


def from_r_half_args(name, cls):
    """Positional arguments of ``cls.from_r_half`` after the half-light radius, in class order."""
    return tuple(LIGHT_SHAPES[name][p] for p in cls.shape_parameters)
