"""Mass-concentration relations for NFW haloes, with their log-normal scatter.

Every relation returns the *median* concentration c200 = R200 / r_s, where R200 encloses a mean
density of 200 times the critical density and M200 [Msun] is the mass inside it. The functions are
pure JAX in the mass (and in the subhalo distance), so they can sit inside numpyro priors and be
differentiated, jitted and vmapped; the Hubble parameter and the host properties are plain floats
fixed at trace time.

The halo-to-halo scatter is log-normal: log10 c200 ~ Normal(log10 c_median(M), sigma_dex), with
``sigma_dex`` listed per relation in :data:`SCATTER_DEX`; :func:`lognormal_prior` returns the pair
``(mean_log10_c, sigma_dex)`` ready for a prior.

Published fits express masses in h^-1 Msun; the functions take M200 in Msun and convert with the
dimensionless Hubble parameter ``h`` (Planck18, h = 0.6766, by default):
M [h^-1 Msun] = h x M [Msun].
"""

import functools

import jax.numpy as jnp

from halo.physics.cosmology import hubble_h, r200_from_m200, rho_crit

__all__ = [
    "dutton_maccio14",
    "sanchez_conde_prada14",
    "moline17",
    "host_r200",
    "CONCENTRATION_RELATIONS",
    "SCATTER_DEX",
    "SUBHALO_RELATIONS",
    "lognormal_prior",
]

#: Milky Way M200 [Msun] used as the default host of subhaloes (common practice: 1e12 Msun).
MW_M200 = 1.0e12

# Sanchez-Conde & Prada (2014), eq. (1) coefficients c_0 ... c_5 [memory]
_SCP14_COEFFS = (37.5153, -1.5093, 1.636e-2, 3.66e-4, -2.89237e-5, 5.32e-7)

# Moline et al. (2017), c200(m200, x_sub) fit: c0, a_1..a_3, b [memory]
_MOLINE17_C0 = 19.9
_MOLINE17_A = (-0.195, 0.089, 0.089)
_MOLINE17_B = -0.54


@functools.lru_cache(maxsize=1)
def _planck18_h():
    return hubble_h()


def _h(h):
    return _planck18_h() if h is None else float(h)


def dutton_maccio14(m200, z=0.0, *, h=None):
    """Median c200 of Dutton & Maccio (2014), NFW fit to Planck-cosmology haloes.

    Parameters
    ----------
    m200 : float or array
        Halo mass M200 [Msun] (200 x critical density).
    z : float or array, optional
        Redshift (the fit covers 0 <= z <= 5).
    h : float, optional
        Dimensionless Hubble parameter used to express M200 in h^-1 Msun (default Planck18).

    Returns
    -------
    c200 : array
        Median concentration (dimensionless).

    Notes
    -----
    log10 c200 = a + b log10(M200 / (1e12 h^-1 Msun)),
    a = 0.520 + (0.905 - 0.520) exp(-0.617 z^1.21), b = -0.101 + 0.026 z.
    Scatter about the median: 0.11 dex in log10 c (:data:`SCATTER_DEX`) [memory].
    The simulations resolve M200 >~ 1e10 h^-1 Msun; dwarf-galaxy masses are an extrapolation of the
    power law, which overestimates c at very low mass compared with relations that flatten
    (e.g. :func:`sanchez_conde_prada14`).

    References
    ----------
    Dutton A. A., Maccio A. V., 2014, MNRAS 441, 3359 (arXiv:1402.7073), the c200 NFW fit.
    """
    hh = _h(h)
    z = jnp.asarray(z, dtype=float)
    a = 0.520 + (0.905 - 0.520) * jnp.exp(-0.617 * z**1.21)
    b = -0.101 + 0.026 * z
    return 10.0 ** (a + b * jnp.log10(hh * jnp.asarray(m200) / 1.0e12))


def sanchez_conde_prada14(m200, z=0.0, *, h=None):
    """Median c200 of Sanchez-Conde & Prada (2014), valid from micro-haloes to clusters at z = 0.

    Parameters
    ----------
    m200 : float or array
        Halo mass M200 [Msun] (200 x critical density).
    z : float or array, optional
        Redshift. The published fit is for z = 0; for z > 0 the median is divided by (1 + z)
        (see Notes).
    h : float, optional
        Dimensionless Hubble parameter used to express M200 in h^-1 Msun (default Planck18).

    Returns
    -------
    c200 : array
        Median concentration (dimensionless).

    Notes
    -----
    c200(M200, z=0) = sum_{i=0..5} c_i [ln(M200 / (h^-1 Msun))]^i,
    c_i = (37.5153, -1.5093, 1.636e-2, 3.66e-4, -2.89237e-5, 5.32e-7) [memory].
    The fit reproduces the Prada et al. (2012) model at z = 0 and shows the flattening of c(M)
    towards low masses. The (1 + z)^-1 factor applied for z > 0 is the usual extrapolation of
    z = 0 fits; it is not part of the paper's fit as far as recalled [memory].
    Scatter: 0.14 dex in log10 c (:data:`SCATTER_DEX`) [memory].

    References
    ----------
    Sanchez-Conde M. A., Prada F., 2014, MNRAS 442, 2271 (arXiv:1312.1729), their c200 fit.
    """
    x = jnp.log(_h(h) * jnp.asarray(m200))
    c = jnp.zeros_like(x)
    for coeff in reversed(_SCP14_COEFFS):  # Horner's scheme (six fixed terms, unrolled at trace)
        c = c * x + coeff
    return c / (1.0 + jnp.asarray(z, dtype=float))


def host_r200(m200_host=MW_M200, z=0.0, cosmology=None):
    """R200 [kpc] of a host of mass ``m200_host`` [Msun]: (3 M / (4 pi 200 rho_c(z)))^(1/3).

    About 211 kpc for the default Milky Way (M200 = 1e12 Msun, Planck18, z = 0).
    """
    return r200_from_m200(m200_host, rho_crit(cosmology, z))


def moline17(m200, distance_kpc, *, h=None, m200_host=MW_M200, r_host_kpc=None):
    """Median c200 of subhaloes, Moline et al. (2017), as a function of mass and host distance.

    Parameters
    ----------
    m200 : float or array
        Subhalo mass m200 [Msun].
    distance_kpc : float or array
        Distance of the subhalo from the host centre R_sub [kpc] (galactocentric distance).
    h : float, optional
        Dimensionless Hubble parameter used to express m200 in h^-1 Msun (default Planck18).
    m200_host : float, optional
        Host M200 [Msun] used to set the host radius when ``r_host_kpc`` is not given
        (default 1e12 Msun for the Milky Way, common practice).
    r_host_kpc : float, optional
        Host radius [kpc] normalising the distance; default ``host_r200(m200_host)``
        (Planck18, z = 0; about 211 kpc for the default host).

    Returns
    -------
    c200 : array
        Median subhalo concentration (dimensionless).

    Notes
    -----
    c200 = c0 [1 + sum_{i=1..3} (a_i log10(m200 / (1e8 h^-1 Msun)))^i] [1 + b log10 x_sub],
    x_sub = R_sub / R_host, c0 = 19.9, a_i = (-0.195, 0.089, 0.089), b = -0.54 [memory].
    The paper normalises the distance by the host's virial radius (Via Lactea II and ELVIS hosts)
    [memory]; here the host R200 (200 x critical) stands in for it. A 30 per cent larger R_host
    raises c200 by about 4.5 per cent at x_sub = 0.2 (pass ``r_host_kpc`` to choose another
    normalisation). Calibrated on subhaloes of 1e6-1e11 h^-1 Msun at z = 0 [memory]; the factor
    1 + b log10 x_sub turns negative beyond x_sub ~ 70, far outside any host.
    Scatter: about 0.1 dex in log10 c (:data:`SCATTER_DEX`) [memory].

    References
    ----------
    Moline A., Sanchez-Conde M. A., Palomares-Ruiz S., Prada F., 2017, MNRAS 466, 4974
    (arXiv:1603.04057), the c200(m200, x_sub) fit.
    """
    r_host = host_r200(m200_host) if r_host_kpc is None else float(r_host_kpc)
    lm = jnp.log10(_h(h) * jnp.asarray(m200) / 1.0e8)
    poly = 1.0
    for i, a_i in enumerate(_MOLINE17_A, start=1):
        poly = poly + (a_i * lm) ** i
    x_sub = jnp.asarray(distance_kpc) / r_host
    return _MOLINE17_C0 * poly * (1.0 + _MOLINE17_B * jnp.log10(x_sub))


#: name -> median c200 function
CONCENTRATION_RELATIONS = {
    "dutton14": dutton_maccio14,
    "sanchez-conde14": sanchez_conde_prada14,
    "moline17": moline17,
}

#: name -> log-normal scatter of c200 about the median [dex] (all [memory], see each function)
SCATTER_DEX = {
    "dutton14": 0.11,
    "sanchez-conde14": 0.14,
    "moline17": 0.10,
}

#: relations that need the subhalo's distance from its host
SUBHALO_RELATIONS = frozenset({"moline17"})


def lognormal_prior(name, m200, *, z=0.0, distance_kpc=None, **kwargs):
    """Log-normal prior on c200 from a named relation: ``(mean_log10_c, sigma_dex)``.

    Parameters
    ----------
    name : str
        A key of :data:`CONCENTRATION_RELATIONS`.
    m200 : float or array
        Halo mass M200 [Msun] (may be a traced JAX value).
    z : float, optional
        Redshift (field relations only; the subhalo relation is for z = 0).
    distance_kpc : float or array, optional
        Distance from the host centre [kpc]; required by subhalo relations.
    **kwargs
        Passed to the relation (e.g. ``h``, ``r_host_kpc``).

    Returns
    -------
    mean_log10_c : array
        log10 of the median c200.
    sigma_dex : float
        Scatter of log10 c200 [dex].

    Notes
    -----
    log10 c200 ~ Normal(mean_log10_c, sigma_dex), i.e. c200 is log-normal with median
    10^mean_log10_c and ln-scatter sigma_dex ln 10.
    """
    if name not in CONCENTRATION_RELATIONS:
        known = ", ".join(sorted(CONCENTRATION_RELATIONS))
        raise ValueError(f"unknown concentration relation {name!r} (known: {known})")
    func = CONCENTRATION_RELATIONS[name]
    if name in SUBHALO_RELATIONS:
        if distance_kpc is None:
            raise ValueError(f"concentration relation {name!r} needs distance_kpc")
        if isinstance(z, int | float) and z != 0.0:
            raise ValueError(f"concentration relation {name!r} is calibrated at z = 0 only")
        c = func(m200, distance_kpc, **kwargs)
    else:
        c = func(m200, z, **kwargs)
    return jnp.log10(c), SCATTER_DEX[name]
