"""Views of a workspace: its status (what is stale, what the next refit would do), the latest
run, the history of runs, and the history figure."""

from pathlib import Path

import numpy as np

from halo.core.errors import InputError
from halo.core.fileio import atomic_path
from halo.workspace.planning import plan as make_plan
from halo.workspace.record import open_workspace
from halo.workspace.refit import action_text, last_settings

__all__ = ["status", "latest_run_folder", "history", "history_figure"]


def _stale(last, latest, plan):
    """Why the last run no longer matches the inputs (lines of text)."""
    if last is None:
        return ["never fitted"]
    stale = []
    if last["catalogue_sha256"] != latest["sha256"]:
        stale.append(
            f"catalogue version {latest['seq']} is newer than the one of run {last['seq']} "
            f"(version {last['catalogue_seq']})"
        )
    if last["satellite_sha256"] != plan["satellite"]["sha256"]:
        stale.append(
            f"the satellite file changed since the last run ({plan['satellite']['source']})"
        )
    for n, sha in plan["specs"].items():
        if last["specs"].get(n) != sha:
            stale.append(f"model {n} is new or its spec changed")
    if last["settings"] != plan["settings"]:
        stale.append("the fit settings differ from the last run's")
    return stale


def status(root, settings=None):
    """A dict saying what is stale and what the next refit (with the last run's settings unless
    ``settings`` is given) would do."""
    ws = open_workspace(root)
    settings = last_settings(root) if settings is None else settings
    latest = ws.latest_catalogue()
    out = {
        "workspace": str(ws.root),
        "catalogue": latest,
        "satellite": ws.latest_satellite(),
        "models": ws.meta("specs"),
        "runs": len(ws.runs_list()),
    }
    if latest is None:
        out["stale"] = ["no catalogue yet: add one with `halo add`"]
        out["next"] = {}
        return out
    plan = make_plan(ws, settings)
    last = plan["last"]
    out["stale"] = _stale(last, latest, plan)
    out["up_to_date"] = plan["up_to_date"]
    out["last_run"] = None if last is None else {"seq": last["seq"], "folder": last["folder"]}
    out["next"] = {n: a for n, (a, _, _) in plan["models"].items()}
    out["next_text"] = {n: action_text(*m) for n, m in plan["models"].items()}
    if plan["satellite"]["note"]:
        out["satellite"] = plan["satellite"]
        out["notes"] = [plan["satellite"]["note"]]
    return out


def latest_run_folder(root):
    """The newest recorded run's folder (InputError when there is none)."""
    ws = open_workspace(root)
    runs = ws.runs_list()
    if not runs:
        raise InputError(f"{root}: no runs yet; `halo refit` fits the latest catalogue version")
    return ws.runs / runs[-1]["folder"]


def history(root):
    """Per run: time, catalogue version, stars, and per model the headline results."""
    ws = open_workspace(root)
    out = []
    for r in ws.runs_list():
        out.append(
            {
                "run": r["seq"],
                "folder": r["folder"],
                "finished": r["finished"],
                "catalogue_version": r["catalogue_seq"],
                "catalogue_sha256": r["catalogue_sha256"],
                "wall_s": r["wall_s"],
                "reused": r["reused"],
                **r["headline"],
            }
        )
    return out


def _quantile_panel(ax, rows, names, key, label, log):
    """Median and 16-84% bars of a headline quantity per model against the run number."""
    for n in names:
        pts = [(r["run"], r["models"][n].get(key)) for r in rows
               if n in r["models"] and r["models"][n].get(key)]  # fmt: skip
        if not pts:
            continue
        xs = [p[0] for p in pts]
        med = np.array([p[1]["median"] for p in pts])
        lo = np.array([p[1]["p16"] for p in pts])
        hi = np.array([p[1]["p84"] for p in pts])
        ax.errorbar(xs, med, yerr=[med - lo, hi - med], marker="o", capsize=3, label=n)
    ax.set_ylabel(label)
    if log:
        ax.set_yscale("log")


def _bayes_panel(ax, rows, names):
    """ln B against stars only, per model, against the run number."""
    for n in names:
        pts = [(r["run"], r["models"][n]) for r in rows
               if n in r["models"] and "ln_bayes_factor" in r["models"][n]]  # fmt: skip
        if pts:
            ax.errorbar(
                [p[0] for p in pts],
                [p[1]["ln_bayes_factor"] for p in pts],
                yerr=[p[1]["ln_bayes_factor_err"] for p in pts],
                marker="o",
                capsize=3,
                label=n,
            )
    ax.axhline(0.0, color="0.5", lw=0.8)
    ax.set_ylabel("ln B (vs stars only)")


def _members_panel(ax, rows, names):
    """Stars in the catalogue and effective members per model against the run number."""
    x = [r["run"] for r in rows]
    ax.plot(x, [r["n_stars"] for r in rows], "ks-", label="stars in catalogue")
    for n in names:
        ax.plot(
            x,
            [r["models"].get(n, {}).get("effective_members") or np.nan for r in rows],
            "o--",
            label=f"members ({n})",
        )
    ax.set_ylabel("stars")


def history_figure(root, rows, path=None):
    """history.png: M(<r_1/2), log10 J(0.5 deg), ln B and members against the run number."""
    from halo.products.plots import _plt

    ws = open_workspace(root)
    path = Path(path or ws.root / "history.png")
    plt = _plt()
    fig, axes = plt.subplots(2, 2, figsize=(9, 6.5), sharex=True)
    names = sorted({n for r in rows for n in r["models"]})
    _quantile_panel(axes[0, 0], rows, names, "m_half_msun", "M(<r_1/2) [Msun]", True)
    _quantile_panel(axes[0, 1], rows, names, "log10_j_0.5", "log10 J(0.5 deg) [GeV^2 cm^-5]", False)
    _bayes_panel(axes[1, 0], rows, names)
    _members_panel(axes[1, 1], rows, names)
    for a in axes.ravel():
        a.legend(fontsize=7)
    for a in axes[1]:
        a.set_xlabel("run")
    fig.suptitle(f"history of {ws.root.name}")
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=110)
    plt.close(fig)
    return path
