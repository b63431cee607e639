"""``halo mock`` as a library call: the catalogue file, its truth beside it, refusals."""

import json

import numpy as np
import pytest
from astropy.table import Table

from halo.core.errors import InputError
from halo.mock.files import write_mock
from halo.pipeline.demo import demo_satellite_path

OPTIONS = dict(n_stars=40, v_sys=10.0, error_range=(1.0, 2.0), method="gaussian", seed=3)


def test_ecsv_with_truth_in_header_and_beside(tmp_path):
    out = tmp_path / "m.ecsv"
    values = {"m200": 1e9, "c200": 15.0}
    path, truth_path = write_mock(
        demo_satellite_path(), out, "nfw", values, binary_fraction=0.5, **OPTIONS
    )
    assert path == out and truth_path == tmp_path / "m.ecsv.truth.json"
    truth = json.loads(truth_path.read_text())
    t = Table.read(out, format="ascii.ecsv")
    assert t.meta["truth"] == truth
    assert list(t.colnames) == ["id", "ra", "dec", "vlos", "vlos_err"] and len(t) == 40
    assert truth["model"] == "nfw" and truth["parameters"]["m200"] == 1e9
    assert truth["n_binaries"] == len(truth["binary_ids"]) > 0
    # the dark mass inside r_1/2 under the fit outputs' name and, for one version, its old name
    assert truth["dark_mass_half_msun"] == truth["m_half_dark_msun"] > 0
    assert truth["m_half_msun"] > truth["dark_mass_half_msun"]


def test_other_formats_carry_no_header_truth(tmp_path):
    out = tmp_path / "m.csv"
    write_mock(demo_satellite_path(), out, "nfw", {"rho_s": 1e7, "r_s": 0.5}, **OPTIONS)
    t = Table.read(out, format="ascii.csv")
    assert len(t) == 40 and "truth" not in t.meta
    truth = json.loads((tmp_path / "m.csv.truth.json").read_text())
    np.testing.assert_allclose(np.asarray(t["vlos"]).mean(), 10.0, atol=5.0)
    assert truth["parameters"]["stellar_mass"] > 0  # the satellite's stellar mass by default


def test_refuses_unknown_format_and_existing_file(tmp_path):
    with pytest.raises(InputError, match="unknown catalogue format"):
        write_mock(demo_satellite_path(), tmp_path / "m.dat", "stars-only", {}, **OPTIONS)
    (tmp_path / "m.ecsv").write_text("keep me")
    with pytest.raises(InputError, match="file exists"):
        write_mock(demo_satellite_path(), tmp_path / "m.ecsv", "stars-only", {}, **OPTIONS)
    assert (tmp_path / "m.ecsv").read_text() == "keep me"
