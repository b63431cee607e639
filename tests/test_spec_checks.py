"""A model spec is checked whole when it is read: `halo fit` refuses a bad one with exit 2 and
one line naming the file and the key, before anything is sampled or written."""

import pytest

from halo.cli.app import main
from halo.pipeline.demo import demo_catalogue_path

HEAD = 'dark_profile = "nfw"\nanisotropy = "constant"\n'
M200 = '[parameters.m200]\nprior = "log-uniform"\nlow = 1e5\nhigh = 1e11\n'
C200 = '[parameters.c200]\nprior = "concentration"\nrelation = "dutton14"\n'
BETA = '[parameters.beta]\nprior = "symmetrised-uniform"\nlow = -0.9\nhigh = 0.9\n'


def _spec(m200=M200, c200=C200, beta=BETA, head=HEAD):
    return head + m200 + c200 + beta


BAD_SPECS = [
    (_spec(c200=C200.replace("dutton14", "bullock01")), "c200", "relation must be one of"),
    (_spec(c200=C200 + 'subhalo_relation = "dutton14"\n'), "c200", "subhalo_relation"),
    (_spec(m200=M200 + "hihg = 3\n"), "m200", "unknown key 'hihg'"),
    (_spec(beta=BETA.replace("-0.9", "-1.5")), "beta", "(-1, 1]"),
    (_spec(beta=BETA.replace("0.9\n", "1.5\n")), "beta", "(-1, 1]"),
    (
        _spec(m200='[parameters.m200]\nprior = "concentration"\nrelation = "dutton14"\n'),
        "m200",
        "c200 only",
    ),
    (_spec(beta='[parameters.beta]\nprior = "uniform"\nlow = 0\nhigh = 2\n'), "beta", "below 1"),
    (_spec(beta='[parameters.beta]\nprior = "fixed"\nvalue = 1.2\n'), "beta", "below 1"),
    (_spec(beta='[parameters.beta]\nprior = "normal"\nmean = 0\nsigma = 0.3\n'), "beta", "below 1"),
    (_spec(beta='[parameters.beta]\nprior = "fixed"\nvalue = nan\n'), "beta", "finite"),
    (_spec(beta='[parameters.beta]\nprior = "fixed"\nvalue = "a"\n'), "beta", "number"),
    (_spec(m200=M200.replace("1e5", "-1e5").replace("log-", "")), "m200", "positive"),
    (_spec(m200=M200.replace("1e11", "inf")), "m200", "finite"),
    (
        _spec(m200=M200 + '[parameters.r_t]\nprior = "fixed"\nvalue = -inf\n'),
        "r_t",
        "positive",
    ),
    (
        HEAD.replace("nfw", "core-nfw")
        + M200
        + C200
        + BETA
        + '[parameters.r_c]\nprior = "log-uniform"\nlow = 0.01\nhigh = 1\n'
        + '[parameters.n]\nprior = "uniform"\nlow = 0\nhigh = 2\n',
        "'n'",
        "[0, 1]",
    ),
    (
        _spec(m200=M200.replace("m200", "m201")),
        "m201",
        "not a parameter",
    ),
]


@pytest.mark.parametrize("text,key,needle", BAD_SPECS)
def test_fit_refuses_a_bad_spec_before_sampling(capsys, tmp_path, text, key, needle):
    spec = tmp_path / "bad.toml"
    spec.write_text(text)
    out = tmp_path / "out"
    args = ["fit", str(demo_catalogue_path()), "demo", "--out", str(out), "--model", str(spec)]
    code = main(args + ["--chains", "2", "--warmup", "150", "--draws", "150", "--quiet"])
    _, err = capsys.readouterr()
    assert code == 2, err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert str(spec) in err and key in err and needle in err
    assert not out.exists()


def test_predict_refuses_a_bad_spec(capsys, tmp_path):
    spec = tmp_path / "bad.toml"
    spec.write_text(_spec(c200=C200.replace("dutton14", "nope")))
    code = main(["predict", "demo", "--model", str(spec), "--set", "m200=1e9", "--set", "c200=9"])
    _, err = capsys.readouterr()
    assert code == 2 and "relation must be one of" in err and str(spec) in err


def test_spec_folder_and_unreadable_file(capsys, tmp_path):
    folder = tmp_path / "x.toml"
    folder.mkdir()
    code = main(["predict", "demo", "--model", str(folder)])
    _, err = capsys.readouterr()
    assert code == 2 and str(folder) in err
    spec = tmp_path / "latin.toml"
    spec.write_bytes(b"description = '\xe9'\n")
    code = main(["predict", "demo", "--model", str(spec)])
    _, err = capsys.readouterr()
    assert code == 2 and "cannot read" in err and str(spec) in err


def test_shipped_specs_pass_the_checks():
    from halo.inputs.spec import available_specs, load_spec

    assert all(load_spec(n).name == n for n in available_specs())
