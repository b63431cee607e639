"""Velocity anisotropy beta(r) = 1 - sigma_t^2 / sigma_r^2.

Each model gives ``beta(r)`` and ``log_f(r)``, the log of the Jeans integrating factor
f(r) = exp Int 2 beta(r) / r dr (Binney & Tremaine 2008, eq. 4.216 and its solution), up to an
additive constant that cancels in the solver.
"""

import jax.numpy as jnp

from halo.core.pytree import pytree

__all__ = ["Constant", "OsipkovMerritt", "BaesVanHese", "ANISOTROPIES", "symmetrised_to_beta"]


@pytree
class Constant:
    """Constant anisotropy beta = ``value`` (< 1); f = r^(2 beta)."""

    value: float = 0.0

    def beta(self, r):
        return jnp.zeros_like(r) + self.value

    def log_f(self, r):
        return 2.0 * self.value * jnp.log(r)


@pytree
class OsipkovMerritt:
    """Osipkov (1979) - Merritt (1985) anisotropy: beta = r^2 / (r^2 + r_a^2), r_a [kpc].

    f = (r^2 + r_a^2) / r_a^2.
    """

    r_a: float

    def beta(self, r):
        return r**2 / (r**2 + self.r_a**2)

    def log_f(self, r):
        return jnp.log1p((r / self.r_a) ** 2)


@pytree
class BaesVanHese:
    """Baes & van Hese (2007, A&A 471, 419) anisotropy.

    beta(r) = (beta_0 + beta_inf (r/r_a)^eta) / (1 + (r/r_a)^eta);
    f(r) = r^(2 beta_0) (1 + (r/r_a)^eta)^(2 (beta_inf - beta_0) / eta).
    """

    beta_0: float
    beta_inf: float
    r_a: float
    eta: float

    def beta(self, r):
        y = (r / self.r_a) ** self.eta
        return (self.beta_0 + self.beta_inf * y) / (1.0 + y)

    def log_f(self, r):
        ly = self.eta * jnp.log(r / self.r_a)
        return 2.0 * self.beta_0 * jnp.log(r) + 2.0 * (self.beta_inf - self.beta_0) / self.eta * (
            jnp.logaddexp(0.0, ly)
        )


def symmetrised_to_beta(beta_sym):
    """beta from the symmetrised anisotropy beta~ = beta / (2 - beta) in [-1, 1] (common practice):
    beta = 2 beta~ / (1 + beta~)."""
    return 2.0 * beta_sym / (1.0 + beta_sym)


ANISOTROPIES = {
    "constant": Constant,
    "osipkov-merritt": OsipkovMerritt,
    "baes-van-hese": BaesVanHese,
}
