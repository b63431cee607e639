"""Whether the data resolve the velocity dispersion, in words, and the upper limits quoted when
they do not (summary.json ``dispersion`` and ``upper_limits``)."""

import numpy as np

from halo.core.vocabulary import angle_keys
from halo.inference.resolution import dispersion_resolution

__all__ = ["resolution", "upper_limits"]


def _message(out):
    if out["resolved"]:
        return (
            f"velocity dispersion resolved: {out['sigma_median_kms']:.2f} "
            f"(+{out['sigma_p84_kms'] - out['sigma_median_kms']:.2f}/"
            f"-{out['sigma_median_kms'] - out['sigma_p16_kms']:.2f}) km/s"
        )
    return (
        "the velocity dispersion is NOT RESOLVED by these data (sigma = 0 is allowed: "
        f"2 delta ln L = {out['two_delta_ln_l']:.2f} < 4); quote upper limits: sigma_los < "
        f"{out['sigma_upper95_kms']:.2f} km/s (95%) and the models' 95% upper limits on "
        "the mass (upper_limits in summary.json)"
    )


def resolution(res):
    """Whether the data resolve the dispersion (membership and v_sys from the fit ``res``)."""
    b = res["binaries"]
    out = dispersion_resolution(
        np.asarray(res["data"].v),
        np.asarray(res["data"].v_err),
        float(np.median(res["samples"]["v_sys"])),
        weights=res["member_prob"],
        binaries=b,
        epochs=res["epochs"],
        fraction_range=(0.0, 1.0) if b is None else b.fraction_range,
    )
    out["message"] = _message(out)
    return out


def upper_limits(res):
    """95% upper limits on M(<r_1/2) and, with a dark halo, on log10 J and log10 D."""
    der = res["derived"]
    out = {"m_half_msun_upper95": float(np.percentile(der["m_half_msun"], 95))}
    if "log10_j" in der:
        keys = angle_keys()
        out["log10_j_upper95"] = {
            k: float(np.percentile(der["log10_j"][:, i], 95)) for i, k in enumerate(keys)
        }
        out["log10_d_upper95"] = {
            k: float(np.percentile(der["log10_d"][:, i], 95)) for i, k in enumerate(keys)
        }
    return out
