"""Epoch-to-epoch velocity changes of the stars measured more than once, against their errors,
the likely binaries marked (written only when the catalogue has multi-epoch stars).

Per pair of consecutive epochs of a star: dv = v_(k+1) - v_k and sigma_dv = sqrt(e_k^2 +
e_(k+1)^2); a star of constant velocity with Gaussian errors has |dv| / sigma_dv distributed as
the absolute value of a unit normal (the half-normal; common practice).
"""

import numpy as np

from halo.products.plots_base import open_markers, save_data, save_png, title
from halo.results.members import LIKELY_BINARY_BAYES_FACTOR, binary_bayes_factor

__all__ = ["epoch_pairs", "epochs_figure"]


def epoch_pairs(stars):
    """Consecutive epoch pairs: dict of arrays star (index), dv, sigma_dv [km/s], dt [day]."""
    s = np.asarray(stars.epoch_star)
    v, e = np.asarray(stars.epoch_v, float), np.asarray(stars.epoch_err, float)
    mjd = np.asarray(stars.epoch_mjd, float)
    same = s[1:] == s[:-1]  # epochs are grouped by star, ordered by mjd within a star
    return {
        "star": s[1:][same],
        "dv": (v[1:] - v[:-1])[same],
        "sigma_dv": np.hypot(e[1:], e[:-1])[same],
        "dt": (mjd[1:] - mjd[:-1])[same],
    }


def _likely(res, member_prob):
    """(likely binary: a member, p_member >= 0.5, whose binary Bayes factor exceeds
    LIKELY_BINARY_BAYES_FACTOR; the Bayes factors), (None, None) without binaries."""
    bf = binary_bayes_factor(res)
    if bf is None:
        return None, None
    bf = np.asarray(bf)
    return (bf > LIKELY_BINARY_BAYES_FACTOR) & (np.asarray(member_prob) >= 0.5), bf


def _true_binaries(stars, truth):
    if not truth or "binary_ids" not in truth:
        return None
    ids = {str(i) for i in truth["binary_ids"]}
    return np.array([str(i) in ids for i in np.asarray(stars.id)])


def _scatter(ax, pairs, likely, true_bin, member):
    x, y = pairs["sigma_dv"], np.abs(pairs["dv"])
    star = pairs["star"]
    flag = np.zeros(star.size, bool) if likely is None else likely[star]
    mem = member[star]
    plain = ~flag & mem
    ax.scatter(x[plain], y[plain], s=14, color="0.35", label="members (p_member >= 0.5)")
    if (~mem).any():
        ax.scatter(
            x[~mem],
            y[~mem],
            s=14,
            marker="x",
            color="0.65",
            lw=0.8,
            label="non-members (p_member < 0.5)",
        )
    if flag.any():
        ax.scatter(
            x[flag],
            y[flag],
            s=22,
            color="tab:red",
            label=f"likely binary (member, Bayes factor > {LIKELY_BINARY_BAYES_FACTOR:g})",
        )
    t = None if true_bin is None else true_bin[star]
    open_markers(ax, x, y, t, marker="s", colour="tab:blue", label="binary (mock truth)", size=60)
    hi = float(x.max()) * 1.25
    xs = np.array([0.0, hi])
    for k, ls in ((1, ":"), (3, "--")):
        ax.plot(xs, k * xs, color="k", ls=ls, lw=0.8, label=f"|dv| = {k} sigma_dv")
    ax.set_xlim(0, hi)
    ax.set_ylim(0, max(float(y.max()), 3 * hi) * 1.05)
    ax.set_xlabel("sigma_dv (error of the change) [km/s]")
    ax.set_ylabel("|dv| (change between epochs) [km/s]")
    ax.legend(loc="upper left", fontsize=7)
    return flag


def _ratio_hist(ax, ratio):
    from scipy.stats import halfnorm

    top = max(5.0, float(np.percentile(ratio, 99)) * 1.05)
    edges = np.linspace(0, top, 26)
    counts, _ = np.histogram(np.clip(ratio, 0, top), bins=edges)
    ax.stairs(counts, edges, color="0.3", fill=True, alpha=0.4, label="pairs")
    expect = ratio.size * np.diff(halfnorm.cdf(edges))
    ax.stairs(expect, edges, color="k", lw=1.0, label="constant velocity (half-normal)")
    ax.text(
        0.97,
        0.6,
        f"last bin: all >= {edges[-2]:.1f}",
        transform=ax.transAxes,
        ha="right",
        fontsize=7,
    )
    ax.set_xlabel("|dv| / sigma_dv [-]")
    ax.set_ylabel("pairs per bin [count]")
    ax.legend(fontsize=7)
    return edges, counts, expect


def epochs_figure(plt, ctx, stars, path, truth):
    """|dv| against sigma_dv with the likely binaries marked, and the histogram of |dv|/sigma_dv
    against the half-normal of constant velocities; None when no star has two epochs."""
    pairs = epoch_pairs(stars)
    if pairs["dv"].size == 0:
        return None
    res = ctx["results"][ctx["stars"]["model"]]
    member = ctx["stars"]["member_prob"] >= 0.5
    likely, bf = _likely(res, ctx["stars"]["member_prob"])
    true_bin = _true_binaries(stars, truth)
    fig, (a1, a2) = plt.subplots(1, 2, figsize=(11, 4.3))
    flag = _scatter(a1, pairs, likely, true_bin, member)
    ratio = np.abs(pairs["dv"]) / pairs["sigma_dv"]
    edges, counts, expect = _ratio_hist(a2, ratio)
    title(a1, f"{ctx['sat_name']}: epoch-to-epoch velocity changes", ctx["summary"])
    a2.set_title(f"{ratio.size} pairs of {np.unique(pairs['star']).size} stars")
    save_png(fig, path)
    plt.close(fig)
    data = {
        "id": np.asarray(stars.id).astype(str)[pairs["star"]].tolist(),
        "dv_kms": pairs["dv"],
        "sigma_dv_kms": pairs["sigma_dv"],
        "dt_days": pairs["dt"],
        "ratio": ratio,
        "likely_binary": flag.tolist(),
        "member": member[pairs["star"]].tolist(),
        "binary_bayes_factor": None if bf is None else bf[pairs["star"]],
        "true_binary": None if true_bin is None else true_bin[pairs["star"]].tolist(),
        "hist_edges": edges,
        "hist_counts": counts,
        "hist_expected_constant": expect,
        "model": ctx["stars"]["model"],
    }
    save_data(path, data)
    return data
