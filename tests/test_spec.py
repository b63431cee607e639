"""Model specs shipped in models/ and the validation of user specs."""

import pytest

from halo.core.errors import InputError
from halo.inputs.spec import available_specs, load_spec, parse_spec


def test_shipped_specs_load():
    names = available_specs()
    assert {"nfw", "cored", "zhao", "einasto", "stars-only"} <= set(names)
    for n in names:
        s = load_spec(n)
        assert s.name == n and s.description
    assert not load_spec("stars-only").has_dark
    assert load_spec("nfw").halo_form == ("m200", "c200")


BASE = {"dark_profile": "nfw", "anisotropy": "constant"}
PARAMS = {
    "m200": {"prior": "log-uniform", "low": 1e5, "high": 1e11},
    "c200": {"prior": "concentration", "relation": "dutton14"},
    "beta": {"prior": "uniform", "low": -1, "high": 0.9},
}


@pytest.mark.parametrize(
    "data,needle",
    [
        ({**BASE, "colour": 1, "parameters": PARAMS}, "unknown key 'colour'"),
        ({"anisotropy": "constant", "parameters": PARAMS}, "missing required key 'dark_profile'"),
        ({**BASE, "dark_profile": "blob", "parameters": PARAMS}, "dark_profile must be"),
        ({**BASE, "anisotropy": "sideways", "parameters": PARAMS}, "anisotropy must be"),
        ({**BASE, "parameters": {**PARAMS, "q": {"prior": "uniform", "low": 0, "high": 1}}}, "'q'"),
        ({**BASE, "parameters": {**PARAMS, "beta": {"prior": "wide"}}}, "prior must be one of"),
        (
            {**BASE, "parameters": {**PARAMS, "beta": {"prior": "uniform", "low": 1}}},
            "needs 'high'",
        ),
        (
            {**BASE, "parameters": {**PARAMS, "beta": {"prior": "uniform", "low": 1, "high": 0}}},
            "low < high",
        ),
        (
            {**BASE, "parameters": {k: v for k, v in PARAMS.items() if k != "c200"}},
            "exactly one of",
        ),
        ({**BASE, "parameters": {k: v for k, v in PARAMS.items() if k != "beta"}}, "missing prior"),
    ],
)
def test_bad_specs(data, needle):
    with pytest.raises(InputError, match=needle):
        parse_spec(data, "x", "x.toml")
