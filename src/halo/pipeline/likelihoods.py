"""The data of each likelihood a fit needs (binary mixture and multi-epoch terms), computed once
per binary population and shared by the models that use it."""

import dataclasses

import numpy as np

from halo.inference.model import make_fit_data
from halo.pipeline.settings import say

__all__ = ["Binaries", "Likelihoods"]


@dataclasses.dataclass(frozen=True)
class Binaries:
    """The binary part of the likelihood: mixture scales, weights and binary-fraction prior."""

    scales: np.ndarray
    weights: np.ndarray
    fraction_range: tuple
    population: object


class Likelihoods:
    """Per-population data for the fit (binary mixture and multi-epoch terms computed once)."""

    def __init__(self, stars, settings, foreground_on):
        self.stars, self.settings, self.foreground_on = stars, settings, foreground_on
        self._cache = {}

    def get(self, spec):
        """(Binaries or None, FitData, EpochTerms or None) for the model ``spec``."""
        if spec is None or not self.settings.binaries:
            key = None
        else:
            key = (spec.binary_population(), spec.binary_fraction_range)
        if key not in self._cache:
            self._cache[key] = self._plain() if key is None else self._with_binaries(*key)
        return self._cache[key]

    def _member_prob(self):
        return self.stars.member_prob if self.foreground_on else None

    def _plain(self):
        s = self.stars
        return (
            None,
            make_fit_data(s.v, s.v_err, s.radius_deg, member_prob=self._member_prob()),
            None,
        )

    def _with_binaries(self, pop, frac):
        from halo.inference.likelihood import epoch_terms
        from halo.physics.binaries import BinaryPopulation, fit_mixture, load_mixture

        stars, settings = self.stars, self.settings
        if pop == BinaryPopulation():
            mixture = load_mixture()
        else:
            say("binary population differs from the default: fitting its mixture", settings)
            mixture = fit_mixture(pop, n=400_000)
        n_multi = int(np.sum(np.asarray(stars.n_epochs) > 1))
        if n_multi:
            say(
                f"binary orbits at the epochs of {n_multi} multi-epoch star(s) "
                f"({settings.n_orbits} orbits each)",
                settings,
            )
        epochs = epoch_terms(stars, mixture, pop, n_orbits=settings.n_orbits)
        data = make_fit_data(
            stars.v, stars.v_err, stars.radius_deg, epochs=epochs, member_prob=self._member_prob()
        )
        return Binaries(mixture.scales, mixture.weights, frac, pop), data, epochs
