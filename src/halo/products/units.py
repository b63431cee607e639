"""The unit of each quantity of summary.ecsv, as an astropy unit string ('' for a dimensionless
number, ``dex(X)`` for log10 of a quantity in X)."""

import functools

__all__ = ["quantity_unit", "UNIT_NOTE"]

#: what the unit column means (summary.ecsv metadata)
UNIT_NOTE = (
    "unit: astropy unit string of the quantiles of that row (astropy.units.Unit(unit)); an empty "
    "unit (which astropy reads back as a masked value) is a dimensionless number; dex(X) is "
    "log10 of a quantity in X, and the std of such a row is a width in plain dex"
)

#: nuisance and latent sites of the fits that are not among a spec's priors
_SITES = {
    "m_star": "solMass",
    "m_star_d0": "solMass",
    "distance": "kpc",
    "r_half_pc": "pc",
    "v_sys": "km / s",
    "v_fg": "km / s",
    "sigma_fg": "km / s",
    "log10_sigma_fg": "dex(km / s)",
    "f_binary": "",
    "f_member": "",
    "beta": "",
    "beta_sym": "",
}

#: derived quantities (summary.json models.<name>.derived)
_DERIVED = {
    "m_half_msun": "solMass",
    "r_half_3d_pc": "pc",
    "ml_half_v": "solMass / solLum",
    "dark_mass_half_msun": "solMass",
    "log_slope_half": "",
    "angle_2rh_deg": "deg",
    "log10_j": "dex(GeV2 / cm5)",
    "log10_d": "dex(GeV / cm2)",
    "log10_j_untruncated": "dex(GeV2 / cm5)",
    "log10_d_untruncated": "dex(GeV / cm2)",
    "r_jacobi_pc": "pc",
}


@functools.cache
def _astropy(unit):
    """An astropy unit string in its own spelling (a spec's 'Msun/kpc^3' -> 'solMass / kpc3')."""
    import astropy.units as u

    try:
        return u.Unit(unit).to_string()
    except ValueError:
        return unit


def _parameter_unit(name, priors):
    if name in priors:
        unit = (priors[name] or {}).get("unit", "")
        return _astropy(unit) if unit else ""
    if name.startswith("log10_") and name[6:] in priors:
        inner = _parameter_unit(name[6:], priors)
        return f"dex({inner})" if inner else "dex"
    return _SITES.get(name)


def quantity_unit(model, quantity, summary):
    """The unit of row (model, quantity) of summary.ecsv; None when it is not known."""
    group, _, rest = quantity.partition(".")
    if model == "estimators":
        return "solMass"
    if group == "parameters":
        priors = summary["models"].get(model, {}).get("priors") or {}
        return _parameter_unit(rest, priors)
    if group == "derived":
        return _DERIVED.get(rest.split(".")[0])
    return None
