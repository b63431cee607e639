"""What the fit report reads from a run folder: summary.json (checked for the keys the report
uses), the figures as data URIs and a few counts from members.ecsv."""

import base64
import json
from pathlib import Path

from halo.core.errors import InputError
from halo.core.fileio import read_input_text
from halo.results.members import LIKELY_BINARY_BAYES_FACTOR

__all__ = ["load_summary", "figure_list", "embed_png", "member_counts", "PNG_SIGNATURE"]

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def load_summary(run_dir):
    run_dir = Path(run_dir)
    path = run_dir / "summary.json"
    if not run_dir.is_dir():
        raise InputError(f"{run_dir}: no such folder (expected a halo fit output folder)")
    text = read_input_text(path, "no such file (not a halo fit output folder?)")
    try:
        summary = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"{path}: malformed JSON (line {exc.lineno}: {exc.msg})") from None
    if not isinstance(summary, dict):
        raise InputError(f"{path}: expected a JSON object at the top level")
    _require(path, summary, "", _SUMMARY_KEYS)
    _require(path, summary["satellite"], "satellite.", {"name": str})
    for name, m in summary["models"].items():
        if not isinstance(m, dict):
            raise InputError(f"{path}: missing or malformed key 'models.{name}'")
        _require(path, m, f"models.{name}.", _MODEL_KEYS)
    return summary


#: keys the report reads, with their JSON types (top level and per model)
_SUMMARY_KEYS = {"satellite": dict, "models": dict, "catalogue": dict, "settings": dict,
                 "created": str}  # fmt: skip


_MODEL_KEYS = {"converged": bool, "derived": dict, "diagnostics": dict, "evidence": dict,
               "loo": dict}  # fmt: skip


def _require(path, obj, prefix, kinds):
    """InputError naming the first of ``kinds`` (key -> type) missing from ``obj`` or of
    another type."""
    for key, kind in kinds.items():
        if not isinstance(obj.get(key), kind):
            raise InputError(f"{path}: missing or malformed key '{prefix}{key}'")


def figure_list(run_dir, summary):
    figs = summary.get("figures")
    if isinstance(figs, list):
        return [str(f) for f in figs]
    return sorted(str(p.relative_to(run_dir)) for p in (run_dir / "figures").glob("*.png"))


def embed_png(run_dir, rel):
    """(data URI, None) for a PNG inside ``run_dir``, or (None, reason it cannot be embedded)."""
    root = run_dir.resolve()
    p = (run_dir / rel).resolve()
    if not p.is_relative_to(root):
        return None, "outside the run folder"
    try:
        data = p.read_bytes()
    except FileNotFoundError:
        return None, "file not found"
    except OSError as exc:
        return None, f"cannot read ({exc.__class__.__name__})"
    if not data.startswith(PNG_SIGNATURE):
        return None, "not a PNG file"
    return "data:image/png;base64," + base64.b64encode(data).decode("ascii"), None


def member_counts(run_dir):
    """A few counts from members.ecsv, or a reason why it could not be read."""
    path = run_dir / "members.ecsv"
    if not path.is_file():
        return None, "members.ecsv is missing from the run folder"
    try:
        import numpy as np
        from astropy.table import Table

        t = Table.read(str(path), format="ascii.ecsv")
        out = {"n": len(t)}
        if "member_prob" in t.colnames:
            mp = np.asarray(t["member_prob"], dtype=float)
            out["sum_member"] = float(np.nansum(mp))
            out["non_members"] = int(np.sum(mp < 0.5))
        # likely binaries on the evidence of the star's velocities (a Bayes factor), not on
        # binary_prob, which for a single-epoch star restates the binary fraction; folders from
        # before that column get no count
        if "binary_bayes_factor" in t.colnames:
            bf = np.asarray(t["binary_bayes_factor"], dtype=float)
            if np.isfinite(bf).any():
                out["binaries"] = int(np.sum(bf > LIKELY_BINARY_BAYES_FACTOR))
        if "n_epochs" in t.colnames:
            out["multi_epoch"] = int(np.sum(np.asarray(t["n_epochs"]) > 1))
        return out, None
    except Exception as exc:  # noqa: BLE001 - any unreadable table is reported, not fatal
        return None, f"members.ecsv could not be read ({exc.__class__.__name__})"
