"""The `einasto` and `zhao` model specs through the command line: `halo predict` against
independent references (sigma_los: the nested quadrature of tests/jeans_reference.py with the
profiles' masses written out here; J and D: the nested scipy quadrature of tests/jfactor_setup.py),
and one tiny fit of each on a mock dwarf."""

import json
import math

import numpy as np
import pytest
from jfactor_setup import cone_ref
from scipy import special

from halo.cli.app import main
from halo.core.constants import MSUN2_KPC5_TO_GEV2_CM5, MSUN_KPC2_TO_GEV_CM2
from halo.inputs.satellite import parse_satellite
from halo.mock.catalogue import make_mock
from halo.physics.dark import NFW

from jeans_reference import beta_np, sigma_los_reference

SAT = {
    "name": "special dwarf",
    "ra_deg": 40.0,
    "dec_deg": -20.0,
    "distance_kpc": 60.0,
    "distance_err_kpc": 3.0,
    "r_half_pc": 40.0,
    "r_half_err_pc": 4.0,
    "stellar_mass_msun": 1.0e4,
    "stellar_mass_err_msun": 2.0e3,
}
RADII_PC = [4.0, 20.0, 40.0, 120.0]
ANGLES = [0.1, 0.5, 2.0]


def _einasto_mass(rho_s, r_s, alpha):
    # Einasto 1965 density rho_s exp(-(2/alpha)(x^alpha - 1)) integrated in closed form with the
    # lower incomplete gamma function (Cardone, Piedipalumbo & Tortora 2005, MNRAS 358, 1325)
    def m(r):
        a3 = 3 / alpha
        y = 2 / alpha * (r / r_s) ** alpha
        norm = 4 * math.pi * rho_s * r_s**3 * math.exp(2 / alpha) * (alpha / 2) ** a3 / alpha
        return norm * special.gamma(a3) * special.gammainc(a3, y)

    def rho(r):
        return rho_s * math.exp(-(2 / alpha) * ((r / r_s) ** alpha - 1))

    return m, rho


def _zhao_mass(rho_s, r_s, alpha, beta, gamma):
    # Zhao 1996 (MNRAS 278, 488) density; its mass as a Gauss hypergeometric function (common
    # practice): M = 4 pi rho_s r_s^3 x^(3-g) / (3-g) 2F1((3-g)/a, (b-g)/a; (3-g+a)/a; -x^a)
    def m(r):
        x = r / r_s
        h = special.hyp2f1(
            (3 - gamma) / alpha, (beta - gamma) / alpha, (3 - gamma + alpha) / alpha, -(x**alpha)
        )
        return 4 * math.pi * rho_s * r_s**3 * x ** (3 - gamma) / (3 - gamma) * h

    def rho(r):
        x = r / r_s
        return rho_s * x**-gamma * (1 + x**alpha) ** (-(beta - gamma) / alpha)

    return m, rho


CASES = {
    "einasto": ["m200=3e9", "c200=12", "alpha=0.2", "beta=0.3", "stellar_mass=1e4"],
    "zhao": [
        "rho_s=5e7", "r_s=0.8", "alpha=2", "beta_out=5", "gamma=0.7", "beta=-0.4",
        "stellar_mass=1e4",
    ],
}  # fmt: skip


@pytest.mark.parametrize("model", list(CASES))
def test_predict_against_independent_references(model, tmp_path, capsys):
    sat = tmp_path / "sat.toml"
    sat.write_text("\n".join(f"{k} = {json.dumps(v)}" for k, v in SAT.items()))
    args = ["predict", str(sat), "--model", model, "--json"]
    for s in CASES[model]:
        args += ["--set", s]
    args += ["--radii-pc", ",".join(map(str, RADII_PC)), "--angles-deg", ",".join(map(str, ANGLES))]
    assert main(args) == 0
    out = json.loads(capsys.readouterr().out)
    p = {k: float(v) for k, v in (s.split("=") for s in CASES[model])}
    der = out["derived"]
    if model == "einasto":  # (m200, c200) -> (rho_s, r_s) is checked in tests/test_dark_m200.py
        mass, rho = _einasto_mass(der["rho_s_msun_kpc3"], der["r_s_kpc"], p["alpha"])
        scale = der["r_s_kpc"]
    else:
        mass, rho = _zhao_mass(p["rho_s"], p["r_s"], p["alpha"], p["beta_out"], p["gamma"])
        scale = p["r_s"]
    b, f = beta_np("constant", {"beta": p["beta"]})
    a = SAT["r_half_pc"] * 1e-3  # Plummer scale = projected half-light radius (round satellite)
    ref = [sigma_los_reference(r * 1e-3, mass, a, b, f, p["stellar_mass"]) for r in RADII_PC]
    # the solver's stated accuracy with DEFAULT orders (halo/physics/jeans.py): 1e-5
    np.testing.assert_allclose(out["sigma_los_kms"], ref, rtol=1e-5)
    d = SAT["distance_kpc"]
    for i, theta in enumerate(ANGLES):
        j = cone_ref(rho, 2, d, math.radians(theta), scale) * MSUN2_KPC5_TO_GEV2_CM5
        dd = cone_ref(rho, 1, d, math.radians(theta), scale) * MSUN_KPC2_TO_GEV_CM2
        assert out["log10_j"][i] == pytest.approx(math.log10(j), abs=1e-8)
        assert out["log10_d"][i] == pytest.approx(math.log10(dd), abs=1e-8)


@pytest.fixture(scope="module")
def tiny_fit(tmp_path_factory):
    """One fit of both specs (and stars only) on 40 mock stars, tiny chains."""
    tmp = tmp_path_factory.mktemp("special_fit")
    sat_path = tmp / "sat.toml"
    sat_path.write_text("\n".join(f"{k} = {json.dumps(v)}" for k, v in SAT.items()))
    # Gaussian velocities from the Jeans sigma_los: an isotropic Plummer tracer in an NFW cusp
    # has no positive distribution function (halo.mock.velocities)
    mock = make_mock(
        parse_satellite(SAT),
        NFW(rho_s=3e7, r_s=0.8),
        n_stars=40,
        error_range_kms=(1.0, 2.0),
        seed=4,
        method="gaussian",
    )
    cat = tmp / "stars.ecsv"
    mock.table.meta.clear()
    mock.table.write(cat, format="ascii.ecsv")
    out = tmp / "out"
    args = ["fit", str(cat), str(sat_path), "--out", str(out), "--chains", "2"]
    args += ["--model", "einasto", "--model", "zhao", "--model", "stars-only"]
    args += ["--warmup", "150", "--draws", "150", "--no-binaries", "--no-foreground", "--quiet"]
    code = main(args)
    return code, json.loads((out / "summary.json").read_text()), mock.truth


@pytest.mark.parametrize("model", list(CASES))
def test_tiny_fit(model, tiny_fit):
    """The spec fits end to end and reports J and D and its shape parameters."""
    code, s, truth = tiny_fit
    assert code == 0
    m = s["models"][model]
    shape = ("alpha",) if model == "einasto" else ("alpha", "beta_out", "gamma")
    for k in shape:
        assert k in m["parameters"], k
    for k in ("0.1", "0.2", "0.5", "2rh"):
        assert math.isfinite(m["derived"]["log10_j"][k]["median"]), k
        assert math.isfinite(m["derived"]["log10_d"][k]["median"]), k
    # 40 stars with 1-2 km/s errors constrain M(<r_1/2) to about a factor 2 (Wolf et al. 2010);
    # a factor 4 about the mock's truth leaves room for the tiny chains
    assert (
        truth["m_half_msun"] / 4 < m["derived"]["m_half_msun"]["median"] < 4 * truth["m_half_msun"]
    )
