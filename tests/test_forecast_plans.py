"""`halo forecast` plans and new-epoch velocities without any fit: the plan grammar (dates against
astropy.time), the new-epoch generator's mean and variance for single stars, the velocity change
of binaries against an independent Monte Carlo of the orbit population, and field stars never
binaries."""

import numpy as np
import pytest
from astropy.time import Time
from scipy import optimize

from halo.batch.forecast_keep import _p_binary, mjd_of_iso_time, new_epoch_velocities
from halo.batch.forecast_plan import YEAR_DAYS, parse_epoch_stars, parse_plan
from halo.core.errors import InputError
from halo.physics.binary_population import BinaryPopulation, sample_orbits


def test_plan_grammar_and_dates_against_astropy_time():
    # MJD of an ISO date: astropy.time.Time(date, scale="utc").mjd (reference library)
    p = parse_plan("+30:epochs@2027-03-01,61500.5")
    assert (p.n_add, p.epochs) == (30, True)
    assert p.dates == (pytest.approx(Time("2027-03-01", scale="utc").mjd), 61500.5)
    assert parse_plan("epochs").dates == () and parse_plan("epochs").epochs
    assert parse_plan("+10") == parse_plan(" +10 ") and parse_plan("+10").n_add == 10
    assert parse_plan("epochs@60800,61165").dates == (60800.0, 61165.0)
    assert parse_plan("+5epochs").epochs  # the old spelling without ':' stays accepted
    assert YEAR_DAYS == 365.25  # the Julian year (IAU), common practice
    stamp = "2026-12-04T03:00:00+00:00"
    assert mjd_of_iso_time(stamp) == pytest.approx(Time(stamp[:19], scale="utc").mjd, abs=1e-6)


@pytest.mark.parametrize(
    "text",
    ["+0", "ten", "+5:second", "epochs+5", "epochs@", "epochs@2027-13-01", "epochs@1,1", "@60000"],
)
def test_bad_plans_are_refused_naming_the_flag(text):
    with pytest.raises(InputError, match="--plan"):
        parse_plan(text)


def test_epoch_stars_from_a_list_or_a_file(tmp_path):
    known = ["1", "2", "3", "17"]
    assert parse_epoch_stars(None, known) is None
    assert parse_epoch_stars("17, 2,17", known) == ["17", "2"]
    f = tmp_path / "ids.txt"
    f.write_text("# chosen\n3\n\n1\n")
    assert parse_epoch_stars(str(f), known) == ["3", "1"]
    with pytest.raises(InputError, match=r"^--epoch-stars: unknown star id '9'"):
        parse_epoch_stars("2,9,8", known)


def test_single_star_new_epoch_mean_and_variance():
    """p_binary = 0: v_new ~ N(v_obs, e_old^2 + e_new^2), the module's stated approximation."""
    rng = np.random.default_rng(1)
    n = 200_000
    v_obs, e_old, e_new = np.full(n, 42.0), np.full(n, 1.5), np.full(n, 2.0)
    v, is_bin = new_epoch_velocities(
        rng, v_obs, e_old, e_new, np.full((n, 1), 365.25), np.zeros(n), BinaryPopulation()
    )
    assert v.shape == (n, 1) and not is_bin.any()
    var = 1.5**2 + 2.0**2
    # sample mean within 5 standard errors; sample variance within 5 sigma (sd = var sqrt(2/n))
    assert abs(v.mean() - 42.0) < 5 * np.sqrt(var / n)
    assert abs(v.var() - var) < 5 * var * np.sqrt(2 / n)


def _kepler_los(orb, t):
    """Independent line-of-sight velocity of the primary: M = M0 + 2 pi t / P, Kepler's equation
    E - e sin E = M solved with scipy.optimize.newton, true anomaly
    nu = 2 atan2(sqrt(1+e) sin(E/2), sqrt(1-e) cos(E/2)), v = K [cos(omega + nu) + e cos omega]
    (textbook radial-velocity curve, e.g. Hilditch 2001, An Introduction to Close Binary Stars,
    eq. 2.45; recalled from memory). Its overall sign convention cancels in the variance."""
    mean = orb.mean_anomaly0 + 2 * np.pi * t / orb.period_days
    ecc = orb.e
    big_e = optimize.newton(
        lambda x: x - ecc * np.sin(x) - mean, mean, fprime=lambda x: 1 - ecc * np.cos(x)
    )
    nu = 2 * np.arctan2(np.sqrt(1 + ecc) * np.sin(big_e / 2), np.sqrt(1 - ecc) * np.cos(big_e / 2))
    return orb.k_kms * (np.cos(orb.omega + nu) + ecc * np.cos(orb.omega))


def test_binary_velocity_change_against_an_independent_monte_carlo():
    """p_binary = 1 with negligible errors: the variance of v_new - v_obs over dt = 200 d equals
    the variance of the orbit population's velocity change, computed from orbits drawn with
    halo.physics.binary_population.sample_orbits (another seed) and the Kepler solution above."""
    pop = BinaryPopulation()
    n, dt = 100_000, 200.0
    tiny = np.full(n, 1e-9)
    v, is_bin = new_epoch_velocities(
        np.random.default_rng(2), np.zeros(n), tiny, tiny, np.full((n, 1), dt), np.ones(n), pop
    )
    assert is_bin.all()
    orb = sample_orbits(pop, n, np.random.default_rng(3))
    ref = _kepler_los(orb, dt) - _kepler_los(orb, 0.0)
    assert np.mean(v[:, 0]) == pytest.approx(0.0, abs=5 * np.std(ref) / np.sqrt(n))
    # two independent samples of a bounded, heavy-shouldered distribution: 6% on the variance
    assert np.var(v[:, 0]) == pytest.approx(np.var(ref), rel=0.06)
    # and the distribution itself: the quantiles of |dv| agree
    q = [0.9, 0.99]  # (the median of |dv| sits in the spike of long periods: too noisy)
    assert np.quantile(np.abs(v[:, 0]), q) == pytest.approx(np.quantile(np.abs(ref), q), rel=0.08)


def test_binary_probability_and_field_stars():
    """A star is a binary with its binary_prob (the draw's f_binary when NaN); field stars never."""
    members = {"a": (0.9, 0.3), "b": (0.9, np.nan), "c": (0.2, 0.9)}
    assert list(_p_binary(["a", "b", "c"], members, 0.6)) == [0.3, 0.6, 0.0]
    rng = np.random.default_rng(5)
    n = 40_000
    p = np.full(n, 0.3)
    one = np.ones(n)
    pop = BinaryPopulation()
    _, is_bin = new_epoch_velocities(rng, 0 * one, one, one, np.full((n, 1), 30.0), p, pop)
    assert abs(is_bin.mean() - 0.3) < 5 * np.sqrt(0.3 * 0.7 / n)  # binomial standard error
