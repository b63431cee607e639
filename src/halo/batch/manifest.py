"""The batch manifest (TOML): one ``[[entry]]`` table per fit, checked whole before anything runs.

::

    # paths are relative to this file
    [[entry]]
    name = "field-a"                # the output folder DIR/<name>/ (letters, digits, . _ -)
    catalogue = "field-a.ecsv"      # velocity catalogue (ECSV, FITS, VOTable or CSV)
    satellite = "field-a.toml"      # satellite description file
    models = ["nfw", "cored"]       # optional: spec names or paths (default: the command's)
    chains = 4                      # optional fit settings: chains, warmup, draws, seed,
    seed = 3                        #   binaries, foreground (true, false, "auto"), anisotropy
    columns = { vlos = "VHEL" }     # optional column overrides (role = column name)

An entry's own keys win over the command line's fit options, which win over halo's defaults. Any
mistake is one :class:`~halo.core.errors.InputError` line naming the manifest, the entry and the
key; the contents of the catalogue and satellite files are read later, by the entry's own task
(a bad file fails that entry only).
"""

import dataclasses
import re
import tomllib
from pathlib import Path

from halo.core.errors import InputError
from halo.core.fileio import read_input_text
from halo.core.vocabulary import DEFAULT_MODELS
from halo.inputs.columns import parse_column_overrides
from halo.inputs.spec import load_spec
from halo.inputs.spec_anisotropy import with_anisotropy
from halo.pipeline.settings import FitSettings

__all__ = ["Entry", "read_manifest", "SETTING_KEYS", "RESERVED_NAMES"]

#: the fit settings an entry may set (FitSettings fields; progress is always off in a batch)
SETTING_KEYS = ("chains", "warmup", "draws", "seed", "binaries", "foreground", "anisotropy")
_REQUIRED = ("name", "catalogue", "satellite")
_KNOWN = _REQUIRED + ("models", "columns") + SETTING_KEYS
#: names an entry's folder may not take (the batch's own files live beside the folders)
RESERVED_NAMES = ("batch.json", "batch.ecsv")
_NAME = re.compile(r"[A-Za-z0-9][A-Za-z0-9._-]{0,99}")


@dataclasses.dataclass(frozen=True)
class Entry:
    """One fit of a batch: absolute input paths, the models and the settings it runs with."""

    name: str
    catalogue: Path
    satellite: Path
    models: tuple
    settings: FitSettings
    columns: tuple = ()  # ("role=NAME", ...) as `halo fit --column` takes them


def _where(manifest, index, name, key=None):
    label = f"entry {index + 1}" + (f" ({name})" if name else "")
    return f"{manifest}: {label}" + (f": key '{key}'" if key else "")


def _string(value, where):
    if not isinstance(value, str) or not value.strip():
        raise InputError(f"{where}: expected a non-empty string, got {value!r}")
    return value


def _input_file(value, base, where):
    path = base / _string(value, where)
    if not path.is_file():
        raise InputError(f"{where}: no such file {path}")
    return path.resolve()


def _models(value, base, where, anisotropy):
    if isinstance(value, str):
        value = [value]
    if not isinstance(value, list) or not value:
        raise InputError(f"{where}: expected a list of model names or paths, got {value!r}")
    out = []
    for m in value:
        m = _string(m, where)
        path = base / m
        chosen = str(path.resolve()) if path.is_file() or m.endswith(".toml") else m
        try:
            with_anisotropy(load_spec(chosen), anisotropy)
        except InputError as exc:
            raise InputError(f"{where}: {exc}") from None
        out.append(chosen)
    return tuple(out)


def _columns(value, where):
    if not isinstance(value, dict) or not all(isinstance(v, str) for v in value.values()):
        raise InputError(f'{where}: expected a table of role = "column name", got {value!r}')
    out = tuple(f"{role}={col}" for role, col in value.items())
    try:
        parse_column_overrides(list(out))
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from None
    return out


def _settings(raw, defaults, where):
    """FitSettings of an entry: its own keys over ``defaults`` (a FitSettings)."""
    changes = {}
    for key in SETTING_KEYS:
        if key not in raw:
            continue
        v = raw[key]
        if key in ("chains", "warmup", "draws", "seed") and (
            isinstance(v, bool) or not isinstance(v, int)
        ):
            raise InputError(f"{where}: key '{key}': expected an integer, got {v!r}")
        if key == "binaries" and not isinstance(v, bool):
            raise InputError(f"{where}: key 'binaries': expected true or false, got {v!r}")
        if key == "foreground" and v not in (True, False, "auto"):
            raise InputError(f"{where}: key 'foreground': expected true, false or \"auto\"")
        changes[key] = v
    try:
        return dataclasses.replace(defaults, progress=False, **changes)
    except InputError as exc:  # FitSettings names the option: say which key of which entry
        raise InputError(f"{where}: {exc}") from None


def _entry(raw, index, manifest, defaults):
    """One checked :class:`Entry` from its TOML table."""
    base = manifest.parent
    if not isinstance(raw, dict):
        raise InputError(f"{_where(manifest, index, None)}: expected a table [[entry]]")
    name = raw.get("name")
    label = name if isinstance(name, str) else None

    def where(key=None):
        return _where(manifest, index, label, key)

    for key in raw:
        if key not in _KNOWN:
            known = ", ".join(_KNOWN)
            raise InputError(f"{where(key)}: unknown key (known: {known})")
    for key in _REQUIRED:
        if key not in raw:
            raise InputError(f"{where(key)}: missing")
    name = _string(name, where("name"))
    if not _NAME.fullmatch(name) or name in RESERVED_NAMES:
        raise InputError(
            f"{where('name')}: expected letters, digits, '.', '_' or '-' (starting with a letter "
            f"or digit, at most 100), not one of {', '.join(RESERVED_NAMES)}; got {name!r}"
        )
    fit_settings, models = defaults
    settings = _settings(raw, fit_settings, where())
    if "models" in raw:
        models = _models(raw["models"], base, where("models"), settings.anisotropy)
    return Entry(
        name=name,
        catalogue=_input_file(raw["catalogue"], base, where("catalogue")),
        satellite=_input_file(raw["satellite"], base, where("satellite")),
        models=tuple(models),
        settings=settings,
        columns=_columns(raw["columns"], where("columns")) if "columns" in raw else (),
    )


def read_manifest(path, settings=None, models=None):
    """The checked entries of manifest ``path``, in file order.

    ``settings``: the command line's FitSettings (entries' own keys win); ``models``: the
    command line's models (default halo's DEFAULT_MODELS), used by entries without ``models``.
    """
    manifest = Path(path)
    try:
        data = tomllib.loads(read_input_text(manifest, missing="no such manifest file"))
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{manifest}: malformed TOML ({exc})") from None
    unknown = [k for k in data if k != "entry"]
    if unknown:
        raise InputError(f"{manifest}: key '{unknown[0]}': unknown (a manifest holds [[entry]])")
    raw = data.get("entry")
    if not isinstance(raw, list) or not raw:
        raise InputError(f"{manifest}: key 'entry': expected one or more [[entry]] tables")
    defaults = (FitSettings() if settings is None else settings, models or DEFAULT_MODELS)
    entries = [_entry(r, i, manifest, defaults) for i, r in enumerate(raw)]
    seen = {}
    for i, e in enumerate(entries):
        folded = e.name.casefold()  # one folder per name on case-insensitive file systems too
        if folded in seen:
            raise InputError(
                f"{_where(manifest, i, e.name, 'name')}: the same name as entry {seen[folded] + 1}"
            )
        seen[folded] = i
    return entries
