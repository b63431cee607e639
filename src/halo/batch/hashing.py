"""The input hash of a batch entry: a rerun skips an entry whose finished result has the same one.

The hash covers everything a fit's result depends on that the user gives: the catalogue's and the
satellite file's bytes, the text of every model spec fitted (the stars-only comparator included,
shipped specs by their packaged text), the fit settings and the column overrides. The entry's name
and where its files live are not part of it (moving a manifest and its files keeps the results).
"""

import hashlib
import json
from importlib import resources
from pathlib import Path

from halo.core.vocabulary import STARS_ONLY
from halo.inputs.spec import load_spec

__all__ = ["entry_hash", "file_sha256"]


def file_sha256(path):
    """sha256 hex digest of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _spec_sha256(name_or_path):
    """[spec name, sha256 of its text] (a shipped spec: its packaged text)."""
    spec = load_spec(name_or_path)
    path = Path(str(name_or_path))
    if path.is_file():
        return [spec.name, file_sha256(path)]
    text = resources.files("halo.models").joinpath(f"{spec.name}.toml").read_bytes()
    return [spec.name, hashlib.sha256(text).hexdigest()]


def entry_hash(entry):
    """{"catalogue", "satellite", "models", "settings", "entry"}: sha256 hex digests of an
    :class:`halo.batch.manifest.Entry`'s inputs, ``entry`` the digest of all of them."""
    models = list(dict.fromkeys([*entry.models, STARS_ONLY]))
    settings = {**entry.settings.as_dict(), "n_orbits": entry.settings.n_orbits}
    settings["columns"] = list(entry.columns)
    parts = {
        "catalogue": file_sha256(entry.catalogue),
        "satellite": file_sha256(entry.satellite),
        "models": hashlib.sha256(
            json.dumps([_spec_sha256(m) for m in models]).encode()
        ).hexdigest(),
        "settings": hashlib.sha256(json.dumps(settings, sort_keys=True).encode()).hexdigest(),
    }
    parts["entry"] = hashlib.sha256(json.dumps(parts, sort_keys=True).encode()).hexdigest()
    return parts
