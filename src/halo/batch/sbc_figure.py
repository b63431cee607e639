"""DIR/rank_histograms.png: one panel per ranked quantity, the rank counts against the band that
uniform ranks fill 99% of the time per bin (binomial quantiles, Talts et al. 2018, Fig. 1)."""

import numpy as np

__all__ = ["rank_figure"]


def _panel(ax, q, n_keep, n_bins):
    from scipy.stats import binom

    counts = np.asarray(q["histogram"])
    edges = np.linspace(0, n_keep + 1, n_bins + 1)
    n = int(counts.sum())
    lo, hi = binom.ppf(0.005, n, 1 / n_bins), binom.ppf(0.995, n, 1 / n_bins)
    ax.axhspan(lo, hi, color="0.85", label="99% band of uniform ranks")
    ax.axhline(n / n_bins, color="0.5", lw=1)
    ax.stairs(counts, edges, color="C0", lw=1.8, label="truths' ranks")
    unit = f" [{q['unit']}]" if q["unit"] else ""
    ax.set_title(
        f"{q['label']}{unit}\nchi2 p = {q['chi2']['p_value']:.3g}, KS p = {q['ks']['p_value']:.3g}",
        fontsize=10,
    )
    ax.set_xlabel(f"rank of the truth among L = {n_keep} posterior draws")
    ax.set_ylabel(f"mocks per bin (of {n})")
    ax.set_xlim(0, n_keep + 1)


def rank_figure(path, stats, n_keep, n_bins, title):
    """Write the rank histograms of ``stats`` (:func:`halo.batch.sbc_ranks.rank_statistics`)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from halo.core.fileio import atomic_path

    keys = [k for k, q in stats.items() if q.get("n")]
    fig, axes = plt.subplots(
        1, max(len(keys), 1), figsize=(3.6 * max(len(keys), 1), 3.6), squeeze=False
    )
    for ax, k in zip(axes[0], keys, strict=False):
        _panel(ax, stats[k], n_keep, n_bins)
    if keys:
        axes[0][0].legend(fontsize=8, loc="lower left")
    fig.suptitle(title, fontsize=11)
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=120)
    plt.close(fig)
