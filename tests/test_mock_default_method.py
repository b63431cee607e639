"""``halo mock`` by default: the equilibrium DF when the model has one, else the Jeans Gaussians.

An isotropic cored tracer has no equilibrium in a cusped halo: its Eddington f is negative at the
most bound energies. Here checked against the closed form of a Plummer tracer in an NFW cusp
(the inversion: Eddington 1916, MNRAS 76, 572; Binney & Tremaine 2008, eq. 4.46; the closed form
is derived here from it, see :func:`halo.mock.distribution.distribution_function`: the Beta-
function integral Int_0^inf s^(p-1) (1 + s^2)^(-9/2) ds = B(p/2, (9 - p)/2) / 2 is common
practice), then through the command users run.
"""

import json
import math

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from astropy.table import Table
from mock_setup import SAT
from scipy.special import beta as beta_fn

from halo.cli.app import main
from halo.core.constants import G
from halo.mock.catalogue import make_mock
from halo.mock.distribution import distribution_function
from halo.physics.anisotropy import Constant, OsipkovMerritt
from halo.physics.dark import NFW
from halo.physics.light import King, Plummer
from halo.physics.mass import MassModel, Stars

_GAUSSIAN = "velocities drawn from Gaussians with the Jeans dispersions (approximate)"


def _closed_form_centre(a, rho_s, r_s):
    """f(Psi(0)) of a unit Plummer tracer (scale a) in the NFW potential when a << r_s.

    Psi(0) - Psi = k r with k = 2 pi G rho_s r_s, nu0 = 3 / (4 pi a^3): f(Psi(0)) =
    5 nu0 (k a)^(-3/2) / (sqrt(8) pi^2) [3 B(5/4, 13/4) - B(1/4, 17/4) / 2] (derived here).
    """
    k = 2.0 * math.pi * G * rho_s * r_s
    nu0 = 3.0 / (4.0 * math.pi * a**3)
    bracket = 3.0 * beta_fn(1.25, 3.25) - 0.5 * beta_fn(0.25, 4.25)
    return 5.0 * nu0 * (k * a) ** -1.5 / (math.sqrt(8.0) * math.pi**2) * bracket


@pytest.mark.parametrize(("r_s_over_a", "tol"), [(1e3, 5e-4), (1e4, 1e-4)])
def test_plummer_in_nfw_cusp_centre_matches_closed_form(r_s_over_a, tol):
    # measured: 2.2e-4 (r_s = 1e3 a) and 2.7e-5 (1e4 a), the O(a / r_s) correction 0.21 a / r_s
    # of the linearised potential (an mpmath quadrature of Eddington's integral in the exact NFW
    # potential gives the same offsets); the bracket is 0.5960 - 1.2912 = -0.6953 < 0
    a, rho_s = 0.03, 1e7
    light = Plummer(a)
    mass = MassModel((NFW(rho_s, r_s_over_a * a), Stars(light, 1e-3)))  # stars negligible
    df = distribution_function(mass, light)
    # f is linear in Psi(0) - Q near the centre of a cusp: extrapolate the two most bound nodes
    slope = (df.f[1] - df.f[0]) / (df.depth[1] - df.depth[0])
    f_centre = df.f[0] - slope * df.depth[0]
    expected = _closed_form_centre(a, rho_s, r_s_over_a * a)
    assert expected < 0 and not df.is_physical
    assert abs(f_centre / expected - 1.0) < tol
    assert -1.44 < df.f.min() / df.f.max() < -1.42  # the example's min f / max f, -1.43


def test_king_tracer_edge_in_nfw_centre_matches_integration_by_parts():
    # A King tracer ends at r_t with nu ~ (r_t - r)^(3/2): d^2 nu / d Psi^2 is singular there, and
    # sampled at the grid's last node (rounded just inside r_t) it made f(Psi(0)) = +1.4e4 instead
    # of -19, so the default method took this model for an equilibrium. Independent check: at the
    # centre of a cusp, by parts, f(Psi(0)) = -1 / (2 sqrt(8) pi^2) Int_0^r_t (-d nu / dr)
    # (Psi(0) - Psi)^(-3/2) dr (derived here from Eddington's formula, Binney & Tremaine 2008
    # eq. 4.46), which needs no second derivative; measured agreement 7e-6
    light = King.from_r_half(0.03, 3.0)
    mass = MassModel((NFW(1e7, 1.0), Stars(light, 3e3)))
    df = distribution_function(mass, light)
    r_t, r0 = float(light.r_edge()), math.exp(df.ln_r[0])
    x, w = np.polynomial.legendre.leggauss(64)
    edges = np.sqrt(np.concatenate([[0.0], np.geomspace(r0 * 1e-3, r_t, 40)]))  # r = t^2
    t = 0.5 * np.diff(edges)[:, None] * x + 0.5 * (edges[1:] + edges[:-1])[:, None]
    r = t**2
    depth = np.where(r < r0, df.depth[0] * r / r0, df.potential(r)[1])  # linear in the cusp
    dnu = np.asarray(jax.vmap(jax.grad(light.density))(jnp.asarray(r.ravel()))).reshape(r.shape)
    total = np.sum(0.5 * np.diff(edges)[:, None] * w * -dnu * depth**-1.5 * 2.0 * t)
    expected = -total / (2.0 * math.sqrt(8.0) * math.pi**2)
    slope = (df.f[1] - df.f[0]) / (df.depth[1] - df.depth[0])
    assert expected < 0 and abs((df.f[0] - slope * df.depth[0]) / expected - 1.0) < 1e-4
    # so the default method draws Gaussians for it (it took the DF before)
    sat = {**SAT, "light_profile": "king", "king_concentration": 3.0}
    mock = make_mock(sat, NFW(1e7, 1.0), stellar_mass=3e3, n_stars=10, seed=2)
    assert mock.truth["method_used"] == "gaussian" and mock.truth["df_physical"] is False


def _sat_toml(tmp_path):
    path = tmp_path / "sat.toml"
    path.write_text(
        'name = "Test Sat"\nra_deg = 150.0\ndec_deg = 20.0\ndistance_kpc = 40.0\n'
        'r_half_pc = 30.0\nstellar_mass_msun = 3000.0\nlight_profile = "plummer"\n'
    )
    return str(path)


def _mock_args(sat, out, *extra):
    return ["mock", sat, "--out", str(out), "--set", "m200=1e9", "--set", "c200=15",
            "--n-stars", "30", *extra]  # fmt: skip


def test_cli_default_falls_back_to_gaussian_for_plummer_in_nfw(tmp_path, capsys):
    sat = _sat_toml(tmp_path)
    out = tmp_path / "m.ecsv"
    assert main(_mock_args(sat, out)) == 0, capsys.readouterr().err
    err = capsys.readouterr().err
    note = [line for line in err.splitlines() if line.startswith("note: --method auto:")]
    assert len(note) == 1 and "cored tracer in this cusped halo" in note[0]
    assert "min f / max f = -1.4" in note[0] and _GAUSSIAN in note[0]
    assert len(Table.read(out, format="ascii.ecsv")) == 30
    truth = json.loads(out.with_suffix(".ecsv.truth.json").read_text())
    assert truth["method"] == "auto" and truth["method_used"] == "gaussian"
    assert truth["method_reason"] in note[0] and truth["df_physical"] is False
    # the explicit equilibrium method still refuses, in one line naming the way out
    assert main(_mock_args(sat, tmp_path / "df.ecsv", "--method", "df")) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "negative" in err and "--method gaussian" in err
    assert not (tmp_path / "df.ecsv").exists()


def test_cli_default_uses_the_df_when_it_is_positive(tmp_path, capsys):
    out = tmp_path / "m.ecsv"
    args = _mock_args(_sat_toml(tmp_path), out, "--model", "cored", "--set", "r_c=0.05",
                      "--set", "n=1")  # fmt: skip
    assert main(args) == 0, capsys.readouterr().err
    assert "note:" not in capsys.readouterr().err  # the expected case goes silently
    truth = json.loads(out.with_suffix(".ecsv.truth.json").read_text())
    assert truth["method"] == "auto" and truth["method_used"] == "df"
    assert "non-negative" in truth["method_reason"] and truth["df_physical"] is True


def test_library_auto_choices():
    light = Plummer(SAT["r_half_pc"] / 1e3)
    # stars only: the self-consistent Plummer sphere has f >= 0
    mock = make_mock(SAT, n_stars=20, seed=1)
    assert mock.truth["method"] == "auto" and mock.truth["method_used"] == "df"
    # the same stars and velocities as the explicit DF method
    df_mock = make_mock(SAT, n_stars=20, seed=1, method="df")
    np.testing.assert_array_equal(mock.table["vlos"], df_mock.table["vlos"])
    assert df_mock.truth["method_used"] == "df" and df_mock.truth["method_reason"] == "requested"
    # Osipkov-Merritt below r_a = 3a/4: negative DF, Gaussians instead
    om = make_mock(SAT, anisotropy=OsipkovMerritt(0.5 * light.a), n_stars=20, seed=1)
    assert om.truth["method_used"] == "gaussian" and om.truth["df_physical"] is False
    assert "Osipkov-Merritt" in om.truth["method_reason"]
    # constant beta != 0 has no DF here
    cb = make_mock(SAT, NFW(3e7, 0.5), anisotropy=Constant(0.3), n_stars=20, seed=1)
    assert cb.truth["method_used"] == "gaussian" and cb.truth["df_physical"] is None
    assert "constant anisotropy beta = 0.3" in cb.truth["method_reason"]
    assert _GAUSSIAN in cb.truth["method_reason"]
