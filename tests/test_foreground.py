"""A dwarf observed with 30% Milky Way foreground in the field.

Members: an equilibrium distribution-function mock of a cored dwarf (halo.mock.catalogue).
Foreground: uniform over the field (a disc of 5 half-light radii), velocities from a two-Gaussian
mixture (not the single Gaussian the likelihood assumes), the same errors. The fit must recover the
mass inside the half-light radius within its 95% interval and rank members above non-members; the
ROC area is the Mann-Whitney statistic U / (n1 n2) (Hanley & McNeil 1982, Radiology 143, 29),
checked against scipy.stats.mannwhitneyu.
"""

import numpy as np
import pytest
from astropy import units as u
from astropy.table import Table, vstack
from scipy.stats import mannwhitneyu
from test_fit import DWARF

from halo.inputs.catalogue import stars_from_table
from halo.inputs.satellite import parse_satellite
from halo.mock.catalogue import make_mock
from halo.mock.sky import sky_coordinates
from halo.physics.cosmology import rho_crit
from halo.physics.dark import CoreNFW
from halo.pipeline.fit import FitSettings, fit

V_SYS = -40.0


def roc_area(scores, labels):
    """P(score of a random positive > score of a random negative), ties counting one half."""
    s, y = np.asarray(scores, float), np.asarray(labels, bool)
    pos, neg = s[y], s[~y]
    gt = (pos[:, None] > neg[None, :]).sum() + 0.5 * (pos[:, None] == neg[None, :]).sum()
    return gt / (len(pos) * len(neg))


def _field(n_members=110, fg_fraction=0.3, seed=41):
    sat = parse_satellite({**DWARF, "ellipticity": 0.0})
    dark = CoreNFW.from_m200_c200(2e9, 16.0, rho_c=rho_crit(), r_c=0.08, n=1.0)
    mock = make_mock(
        sat, dark, n_stars=n_members, v_sys=V_SYS, error_range_kms=(1.0, 2.0), seed=seed
    )
    r_max = 5 * sat.r_half_pc * 1e-3  # kpc
    keep = np.asarray(mock.stars["R"]) < r_max
    mem = mock.table[keep]
    rng = np.random.default_rng(seed + 1)
    n_fg = int(round(fg_fraction / (1 - fg_fraction) * len(mem)))
    rad = r_max * np.sqrt(rng.uniform(size=n_fg))
    phi = rng.uniform(0, 2 * np.pi, n_fg)
    ra, dec = sky_coordinates(
        rad * np.sin(phi), rad * np.cos(phi), sat.ra_deg, sat.dec_deg, sat.distance_kpc
    )
    comp = rng.uniform(size=n_fg) < 0.6
    v = np.where(comp, rng.normal(V_SYS + 60, 40, n_fg), rng.normal(V_SYS - 30, 90, n_fg))
    err = rng.uniform(1.0, 2.0, n_fg)
    fg = Table()
    fg["id"] = np.arange(n_fg) + 100000
    fg["ra"] = u.Quantity(ra, u.deg)
    fg["dec"] = u.Quantity(dec, u.deg)
    fg["vlos"] = u.Quantity(v + err * rng.standard_normal(n_fg), u.km / u.s)
    fg["vlos_err"] = u.Quantity(err, u.km / u.s)
    table = vstack([mem, fg], metadata_conflicts="silent")
    return sat, table, mock.truth


@pytest.fixture(scope="module")
def field_fit(tmp_path_factory):
    sat, table, truth = _field()
    stars = stars_from_table(table, sat, source="field-mock")
    out = tmp_path_factory.mktemp("field")
    settings = FitSettings(chains=2, warmup=300, draws=300, seed=4, progress=False)
    summary = fit(stars, sat, out, ["cored"], settings)
    members = Table.read(out / "members.ecsv", format="ascii.ecsv")
    is_member = np.asarray(members["id"]).astype(int) < 100000
    return summary, members, is_member, truth


def test_roc_area_helper_matches_scipy():
    rng = np.random.default_rng(0)
    s = rng.normal(size=50)
    y = rng.uniform(size=50) < 0.4
    u_stat = mannwhitneyu(s[y], s[~y]).statistic
    assert roc_area(s, y) == pytest.approx(u_stat / (y.sum() * (~y).sum()), rel=1e-12)


def test_foreground_switched_on_automatically(field_fit):
    summary = field_fit[0]
    assert summary["settings"]["foreground"] is True
    assert "median velocity" in summary["settings"]["foreground_reason"]


def test_members_ranked_above_foreground(field_fit):
    summary, members, is_member, _ = field_fit
    auc = roc_area(members["member_prob"], is_member)
    n_eff = summary["models"]["cored"]["effective_members"]
    print(
        f"30% foreground: ROC area {auc:.3f}; effective members {n_eff:.1f} of "
        f"{is_member.sum()} true members ({len(is_member)} stars)"
    )
    assert auc > 0.9
    assert abs(n_eff - is_member.sum()) < 15


def test_mass_recovered_with_foreground(field_fit):
    summary, _, _, truth = field_fit
    q = summary["models"]["cored"]["derived"]["m_half_msun"]
    print(
        f"M(<r_1/2) truth {truth['m_half_msun']:.3g}, posterior {q['median']:.3g} "
        f"[{q['p2.5']:.3g}, {q['p97.5']:.3g}]"
    )
    assert q["p2.5"] <= truth["m_half_msun"] <= q["p97.5"]
