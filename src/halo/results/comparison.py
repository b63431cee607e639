"""A dark model against stars only: ln Bayes factor, difference in ELPD and a verdict in words."""

import numpy as np

__all__ = ["grade", "verdict", "compare"]


def grade(ln_bf):
    """(grade, side) of a ln Bayes factor (dark model over stars only).

    Scale of Kass & Raftery (1995, JASA 90, 773, sec. 3.2) on 2 ln B: < 2 not worth more than a
    bare mention (grade "none", side None), 2-6 "positive", 6-10 "strong", > 10 "very strong";
    side "dark matter" when ln B > 0, else "stars alone".
    """
    two = 2.0 * abs(ln_bf)
    if two < 2:
        return "none", None
    words = "positive" if two < 6 else "strong" if two < 10 else "very strong"
    return words, "dark matter" if ln_bf > 0 else "stars alone"


def verdict(ln_bf, ln_bf_err=0.0):
    """Plain words for a ln Bayes factor (dark model over stars only), on the scale of
    :func:`grade`; "(within the evidence uncertainty)" when |ln B| < 3 x its error."""
    words, side = grade(ln_bf)
    if side is None:
        words = "no preference worth more than a bare mention"
    else:
        words = f"{words} evidence for {side}"
    if ln_bf_err and abs(ln_bf) < 3 * ln_bf_err:
        words += " (within the evidence uncertainty)"
    return words


def compare(res, ref):
    """The ``vs_stars_only`` entry of model result ``res`` against the stars-only result ``ref``."""
    ln_bf = res["evidence"].log_z - ref["evidence"].log_z
    err = float(np.hypot(res["evidence"].log_z_err, ref["evidence"].log_z_err))
    a = np.asarray(res["loo"].elpd_i).ravel()
    b = np.asarray(ref["loo"].elpd_i).ravel()
    diff = a - b
    return {
        "ln_bayes_factor": float(ln_bf),
        "ln_bayes_factor_err": err,
        "delta_elpd": float(np.sum(diff)),
        "delta_elpd_se": float(np.sqrt(len(diff) * np.var(diff))),
        "verdict": verdict(ln_bf, err),
    }
