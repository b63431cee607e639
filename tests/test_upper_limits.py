"""Data that cannot resolve the dispersion: the run says so and reports upper limits.

Mock: a stars-only cluster (dispersion ~0.3 km/s, halo.mock.catalogue distribution function)
measured with 2-3 km/s errors, 40 stars: the dispersion cannot be told from zero. Fitted through the
command line with both likelihood parts switched off, which must be recorded.
"""

import json

import pytest

from halo.cli.app import main
from halo.core.constants import G
from halo.inputs.satellite import parse_satellite
from halo.mock.catalogue import make_mock

CLUSTER = {
    "name": "faint cluster",
    "ra_deg": 80.0,
    "dec_deg": 10.0,
    "distance_kpc": 40.0,
    "distance_err_kpc": 2.0,
    "r_half_pc": 8.0,
    "r_half_err_pc": 1.0,
    "stellar_mass_msun": 3000.0,
    "stellar_mass_err_msun": 800.0,
}


@pytest.fixture(scope="module")
def unresolved(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("unresolved")
    sat_path = tmp / "cluster.toml"
    sat_path.write_text("\n".join(f"{k} = {v!r}".replace("'", '"') for k, v in CLUSTER.items()))
    mock = make_mock(
        parse_satellite(CLUSTER), None, n_stars=40, v_sys=5.0, error_range_kms=(2.0, 3.0), seed=9
    )
    cat = tmp / "cluster.ecsv"
    mock.table.meta.clear()
    mock.table.write(cat, format="ascii.ecsv")
    out = tmp / "out"
    args = [
        "fit",
        str(cat),
        str(sat_path),
        "--out",
        str(out),
        "--model",
        "nfw",
        "--chains",
        "2",
        "--warmup",
        "300",
        "--draws",
        "300",
        "--no-binaries",
        "--no-foreground",
        "--quiet",
    ]
    return main(args), out


def test_unresolved_dispersion_gives_upper_limits(unresolved, capsys):
    code, out = unresolved
    assert code == 0
    summary = json.loads((out / "summary.json").read_text())
    d = summary["dispersion"]
    assert d["resolved"] is False and d["two_delta_ln_l"] < 4
    assert 0 < d["sigma_upper95_kms"] < 3.0  # errors 2-3 km/s, 40 stars
    assert any("NOT RESOLVED" in w for w in summary["warnings"])
    ul = summary["upper_limits"]["nfw"]
    # the mass limit agrees with the dispersion limit: M(<r_1/2) = 3 <sigma_los^2> r_1/2 / G
    # (Wolf et al. 2010, MNRAS 406, 1220, eq. 2) at the 95% dispersion limit bounds the 95% mass
    # limit from above (factor 2 for the estimator's scatter; the posterior of an unresolved
    # dispersion leans to small masses), and the stars' own mass inside r_1/2 from below
    r3_kpc = summary["models"]["nfw"]["derived"]["r_half_3d_pc"]["median"] * 1e-3
    m_wolf = 3 * d["sigma_upper95_kms"] ** 2 * r3_kpc / G
    print(f"M_1/2 upper95 {ul['m_half_msun_upper95']:.3g}, Wolf at sigma_upper95 {m_wolf:.3g}")
    assert 0.5 * CLUSTER["stellar_mass_msun"] / 3 < ul["m_half_msun_upper95"] < 2 * m_wolf
    assert "0.5" in ul["log10_j_upper95"]


def test_switches_recorded(unresolved):
    _, out = unresolved
    st = json.loads((out / "summary.json").read_text())["settings"]
    assert st["binaries"] is False and st["foreground"] is False
    assert st["foreground_reason"] == "switched off by the user"
