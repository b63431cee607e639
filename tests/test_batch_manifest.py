"""`halo batch` without a cluster: the manifest's checks, the input hashes and the batch tables."""

import dataclasses
import shutil

import pytest
from astropy.table import Table
from batch_setup import entry_toml, write_inputs, write_manifest

from halo.batch.hashing import entry_hash
from halo.batch.manifest import read_manifest
from halo.batch.records import headline, write_batch
from halo.cli.app import main
from halo.core.errors import InputError
from halo.core.vocabulary import QUANTILE_KEYS, STARS_ONLY, angle_keys
from halo.pipeline.settings import FitSettings


@pytest.fixture
def inputs(tmp_path):
    return write_inputs(tmp_path / "in", ["a", "b"])


def test_a_manifest_is_read_relative_to_its_folder(inputs, tmp_path):
    folder = inputs["a"].parent
    write_manifest(
        folder / "m.toml",
        entry_toml("one", "a.ecsv", models='["nfw", "cored"]', seed=7, chains=3),
        entry_toml("two", "b.ecsv", columns='{vlos = "vlos"}', foreground='"auto"'),
    )
    cli = FitSettings(chains=2, warmup=60, draws=70, seed=1, binaries=False)
    one, two = read_manifest(folder / "m.toml", cli, ["stars-only"])
    assert one.catalogue == inputs["a"].resolve() and one.satellite.name == "field.toml"
    assert one.models == ("nfw", "cored") and two.models == ("stars-only",)
    # an entry's own keys win over the command line's, the rest are the command line's
    assert (one.settings.seed, one.settings.chains, one.settings.warmup) == (7, 3, 60)
    assert (two.settings.seed, two.settings.draws, two.settings.binaries) == (1, 70, False)
    assert not one.settings.progress and two.columns == ("vlos=vlos",)


BAD = [
    ("[[entry]\n", "malformed TOML"),
    ("title = 1\n", "key 'title'"),
    ("", "key 'entry'"),
    (entry_toml("x", "a.ecsv", colour='"red"'), "entry 1 (x): key 'colour': unknown key"),
    ('[[entry]]\ncatalogue = "a.ecsv"\nsatellite = "field.toml"\n', "entry 1: key 'name': missing"),
    (entry_toml("x", "nope.ecsv"), "entry 1 (x): key 'catalogue': no such file"),
    (entry_toml("x", "a.ecsv", chains='"4"'), "entry 1 (x): key 'chains': expected an integer"),
    (entry_toml("x", "a.ecsv", warmup=10), "entry 1 (x): --warmup: at least 50"),
    (entry_toml("x", "a.ecsv", binaries='"yes"'), "entry 1 (x): key 'binaries'"),
    (entry_toml("x", "a.ecsv", models='["nfx"]'), "entry 1 (x): key 'models': unknown model"),
    (entry_toml("x", "a.ecsv", anisotropy='"sideways"'), "entry 1 (x): --anisotropy"),
    (entry_toml("x", "a.ecsv", columns='{speed = "v"}'), "key 'columns': --column 'speed=v'"),
    (entry_toml("a/b", "a.ecsv"), "entry 1 (a/b): key 'name': expected letters"),
    (entry_toml("batch.json", "a.ecsv"), "key 'name'"),
    (entry_toml("x", "a.ecsv") + entry_toml("X", "b.ecsv"), "entry 2 (X): key 'name': the same"),
]


@pytest.mark.parametrize(("text", "message"), BAD)
def test_a_bad_manifest_is_one_line_naming_manifest_entry_and_key(inputs, text, message):
    path = inputs["a"].parent / "m.toml"
    path.write_text(text)
    with pytest.raises(InputError) as err:
        read_manifest(path)
    assert message in str(err.value) and str(path) in str(err.value), str(err.value)
    assert "\n" not in str(err.value)


def test_the_command_refuses_a_bad_manifest_with_exit_2_and_one_line(inputs, tmp_path, capsys):
    path = write_manifest(inputs["a"].parent / "m.toml", entry_toml("x", "a.ecsv", draws=-1))
    assert main(["batch", str(path), "--out", str(tmp_path / "out"), "--workers", "2"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err, err
    assert err.startswith("halo: error: ") and f"{path}: entry 1 (x): --draws" in err
    assert not (tmp_path / "out").exists()  # nothing written, no cluster started
    assert main(["batch", str(path), "--out", str(tmp_path / "o"), "--workers", "0"]) == 2
    assert "--workers" in capsys.readouterr().err


def test_input_hashes_follow_the_inputs_not_the_folder(inputs, tmp_path):
    folder = inputs["a"].parent
    write_manifest(folder / "m.toml", entry_toml("one", "a.ecsv", models='["nfw"]'))
    (entry,) = read_manifest(folder / "m.toml")
    base = entry_hash(entry)
    moved = shutil.copytree(folder, tmp_path / "elsewhere")
    assert entry_hash(read_manifest(moved / "m.toml")[0]) == base
    changed = dataclasses.replace(entry, settings=dataclasses.replace(entry.settings, seed=1))
    h = entry_hash(changed)
    assert h["settings"] != base["settings"] and h["entry"] != base["entry"]
    assert h["catalogue"] == base["catalogue"]
    h = entry_hash(dataclasses.replace(entry, models=("cored",)))
    assert h["models"] != base["models"] and h["settings"] == base["settings"]
    with open(inputs["a"], "a") as f:
        f.write("# one more comment line\n")
    assert entry_hash(entry)["catalogue"] != base["catalogue"]


def _q(centre):
    return {k: centre + i * 0.01 for i, k in enumerate(QUANTILE_KEYS)}


def _summary():
    """A summary with the contract keys of the design notes (fit output folder section)."""
    jd = {a: _q(18.0 + i) for i, a in enumerate(angle_keys())}
    dark = {
        "converged": True,
        "diagnostics": {"rhat_max": 1.003, "ess_bulk_min": 812.0, "divergences": 0},
        "derived": {"m_half_msun": _q(2e6), "log10_j": jd, "log10_d": jd},
        "vs_stars_only": {"ln_bayes_factor": 4.2, "ln_bayes_factor_err": 0.1, "delta_elpd": 2.0},
    }
    stars = {"converged": False, "diagnostics": {"rhat_max": 1.2}, "derived": {"m_half_msun": None}}
    return {"catalogue": {"n_stars": 30}, "models": {STARS_ONLY: stars, "nfw": dark}}


def test_batch_tables_carry_every_headline_number(tmp_path):
    done = {"name": "one", "status": "done", "error": None, "attempts": 1, "wall_time_s": 3.5}
    done.update(headline(_summary()), hash={"entry": "ab" * 32})
    failed = {"name": "two", "status": "failed", "error": "x.ecsv: bad", "attempts": 2}
    write_batch(tmp_path, [done, failed])
    t = Table.read(tmp_path / "batch.ecsv", format="ascii.ecsv")
    assert list(t["name"]) == ["one", "one", "two"]
    # empty strings read back as masked values (ECSV)
    assert list(t["model"].filled("")) == ["nfw", STARS_ONLY, ""]
    nfw, stars, bad = t
    assert nfw["log10_j_0.5_median"] == 20.0
    assert nfw["log10_d_2rh_std"] == pytest.approx(21.06, abs=1e-12)
    assert nfw["m_half_msun_p97.5"] == 2e6 + 0.04 and nfw["ln_b"] == 4.2
    assert nfw["converged"] and not nfw["entry_converged"] and not stars["converged"]
    assert bad["status"] == "failed" and bad["error"] == "x.ecsv: bad" and bad["attempts"] == 2
    for a in angle_keys():
        for q in QUANTILE_KEYS:
            assert f"log10_j_{a}_{q}" in t.colnames and f"log10_d_{a}_{q}" in t.colnames
