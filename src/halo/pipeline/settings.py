"""What a fit run does: its settings, whether the foreground is modelled, and progress lines."""

import dataclasses
import sys

import numpy as np

from halo.core.errors import InputError
from halo.core.vocabulary import DEFAULT_N_ORBITS
from halo.inputs.spec_anisotropy import check_anisotropy

__all__ = [
    "FitSettings",
    "MIN_CHAINS",
    "MIN_WARMUP",
    "MIN_DRAWS",
    "FOREGROUND_CLIP",
    "FOREGROUND_MIN_OFFSET_KMS",
    "foreground_decision",
    "foreground_setting",
    "say",
]


#: the fewest chains, warmup steps and kept draws per chain a run accepts: below MIN_DRAWS the
#: Pareto-smoothed LOO has too few tail draws (it needs 5 or more, a fifth of the draws of a short
#: run: arviz-stats, Vehtari et al. 2024) and NUTS adaptation has too few steps
MIN_CHAINS, MIN_WARMUP, MIN_DRAWS = 1, 50, 50


@dataclasses.dataclass(frozen=True)
class FitSettings:
    chains: int = 4
    warmup: int = 1000
    draws: int = 1000
    seed: int = 0
    progress: bool = True
    binaries: bool = True
    foreground: bool | str = "auto"  # True, False or "auto" (see foreground_decision)
    n_orbits: int = DEFAULT_N_ORBITS  # Monte Carlo orbits per multi-epoch star
    anisotropy: str | None = None  # a kind replacing every spec's anisotropy; None: each its own
    # J and D of dark haloes truncated at each draw's Jacobi radius (halo.results.truncation)
    tidal_truncation: bool = True

    def __post_init__(self):
        for name, low in (("chains", MIN_CHAINS), ("warmup", MIN_WARMUP), ("draws", MIN_DRAWS)):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, int) or v < low:
                raise InputError(f"--{name}: at least {low} needed, got {v!r}")
        object.__setattr__(self, "anisotropy", check_anisotropy(self.anisotropy))

    def as_dict(self):
        keys = ("chains", "warmup", "draws", "seed", "binaries", "foreground")
        out = {k: getattr(self, k) for k in keys}
        if self.anisotropy is not None:  # absent otherwise: earlier runs' settings stay equal
            out["anisotropy"] = self.anisotropy
        if not self.tidal_truncation:  # likewise: present only when switched off
            out["tidal_truncation"] = False
        return out


#: a star further than this many robust widths from the velocity peak is taken as a sign that
#: the catalogue reaches beyond the members (common practice: 5 sigma clipping)
FOREGROUND_CLIP = 5.0
#: ... and further than this [km/s], so that binaries of a cold system do not trigger it
FOREGROUND_MIN_OFFSET_KMS = 25.0


def foreground_decision(stars):
    """(on, reason): whether the catalogue reaches beyond the members.

    On when the catalogue carries a ``member_prob`` column with values below 1, or when any star
    lies more than FOREGROUND_CLIP robust widths sqrt(s^2 + err^2) (s = 1.4826 MAD of the
    velocities within V_SYS_HALF_WIDTH, common practice) and more than FOREGROUND_MIN_OFFSET_KMS
    from the velocity peak of the inner stars (:func:`halo.inference.systemic.systemic_centre`).
    """
    if stars.member_prob is not None and np.any(np.asarray(stars.member_prob) < 1):
        return True, "the catalogue's member_prob column has values below 1"
    from halo.inference.systemic import V_SYS_HALF_WIDTH, robust_width, systemic_centre

    v = np.asarray(stars.v, dtype=float)
    # about the velocity peak of the inner stars, not the median a rich field drags away
    med = systemic_centre(v, stars.radius_deg)
    s = robust_width(v, med, V_SYS_HALF_WIDTH)
    off = np.abs(v - med)
    far = (off > FOREGROUND_CLIP * np.sqrt(s**2 + np.asarray(stars.v_err) ** 2)) & (
        off > FOREGROUND_MIN_OFFSET_KMS
    )
    if far.any():
        return True, (
            f"{int(far.sum())} star(s) lie more than {FOREGROUND_CLIP:g} robust widths and "
            f"{FOREGROUND_MIN_OFFSET_KMS:g} km/s from the velocity peak (the median velocity of "
            "the densest window of inner stars)"
        )
    return False, (
        "every star lies within "
        f"{FOREGROUND_CLIP:g} robust widths or {FOREGROUND_MIN_OFFSET_KMS:g} km/s of the peak "
        "velocity and there is no member_prob column: the catalogue looks like members only"
    )


def foreground_setting(stars, settings):
    """(on, reason) of the run: the user's choice, or :func:`foreground_decision` for "auto"."""
    if settings.foreground == "auto":
        return foreground_decision(stars)
    if settings.foreground:
        return True, "switched on by the user"
    return False, "switched off by the user"


def say(msg, settings):
    """A progress line on stderr (unless the settings ask for quiet)."""
    if settings.progress:
        print(msg, file=sys.stderr, flush=True)
