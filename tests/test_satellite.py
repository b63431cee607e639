"""Satellite description files: the contract keys, validation with one-line errors."""

import math

import pytest

from halo.core.errors import InputError
from halo.inputs.satellite import parse_satellite, read_satellite
from halo.pipeline.demo import demo_satellite_path

GOOD = {
    "name": "Test",
    "ra_deg": 10.0,
    "dec_deg": -5.0,
    "distance_kpc": 40.0,
    "distance_err_kpc": 2.0,
    "r_half_pc": 30.0,
    "r_half_err_pc": 3.0,
    "ellipticity": 0.36,
    "position_angle_deg": 10.0,
    "light_profile": "plummer",
    "stellar_mass_msun": 3000.0,
    "stellar_mass_err_msun": 900.0,
}


def test_demo_file_reads():
    sat = read_satellite(demo_satellite_path())
    assert sat.light_profile == "plummer" and sat.distance_kpc > 0


def test_circularised_radius_and_luminosity():
    sat = parse_satellite(GOOD)
    # design notes: circularised radius r_half sqrt(1 - e)
    assert sat.r_half_circ_kpc == pytest.approx(0.030 * 0.8)
    sat = parse_satellite({**GOOD, "absolute_magnitude_v": 4.83 - 2.5 * 3})
    # L_V = 10^(-0.4 (M_V - 4.83)) (common practice)
    assert sat.luminosity_v == pytest.approx(1000.0)


def test_magnitude_form_gives_mass_prior():
    d = {k: v for k, v in GOOD.items() if not k.startswith("stellar_mass")}
    sat = parse_satellite({**d, "absolute_magnitude_v": -2.67, "stellar_ml_v": [1.0, 3.0]})
    m, s = sat.stellar_mass_prior()
    assert m == pytest.approx(2.0 * sat.luminosity_v) and s == pytest.approx(sat.luminosity_v)


@pytest.mark.parametrize(
    "change,needle",
    [
        ({"colour": "red"}, "unknown key 'colour'"),
        ({"distance_kpc": -3.0}, "'distance_kpc' must be positive"),
        ({"ellipticity": 1.2}, "'ellipticity'"),
        ({"dec_deg": 95.0}, "'dec_deg'"),
        ({"r_half_pc": "thirty"}, "'r_half_pc' must be a number"),
        ({"light_profile": "blob"}, "'light_profile'"),
        ({"distance_kpc": math.nan}, "finite"),
        ({"stellar_ml_v": [3.0, 1.0]}, "stellar_ml_v"),
    ],
)
def test_bad_values(change, needle):
    with pytest.raises(InputError, match=needle.replace("(", r"\(")):
        parse_satellite({**GOOD, **change}, source="sat.toml")


def test_missing_keys():
    d = dict(GOOD)
    del d["distance_kpc"]
    with pytest.raises(InputError, match="missing required key 'distance_kpc'"):
        parse_satellite(d, source="sat.toml")
    d = {k: v for k, v in GOOD.items() if not k.startswith("stellar_mass")}
    with pytest.raises(InputError, match="stellar mass"):
        parse_satellite(d)
    with pytest.raises(InputError, match="stellar_ml_v"):
        parse_satellite({**d, "absolute_magnitude_v": -3.0})


def test_error_names_file(tmp_path):
    p = tmp_path / "s.toml"
    p.write_text('name = "x"\n')
    with pytest.raises(InputError) as exc:
        read_satellite(p)
    assert str(p) in str(exc.value) and "\n" not in str(exc.value)
