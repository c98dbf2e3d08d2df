"""The hyperprior of the history model (:mod:`archive.planning.priors`): a module of its own with no heavy import,
so that reading an archive's settings does not load the statistics."""

from __future__ import annotations

import math
from dataclasses import dataclass


@dataclass(frozen=True)
class Hyperprior:
    """The prior on the archive-level quantities of the history model (all on the log-lift scale)."""

    mean_sd: float = 0.03  # M ~ Normal(0, mean_sd^2); common practice: most changes move conversion by a few %
    between_themes_scale: float = 0.02  # omega ~ half-normal(scale); common practice, as above
    spread_max: float = 0.3  # tau and omega range over [0, spread_max]; tau uniform there

    def __post_init__(self) -> None:
        scales = (self.mean_sd, self.between_themes_scale, self.spread_max)
        if not all(math.isfinite(x) and x > 0 for x in scales):
            raise ValueError("the hyperprior's scales must be finite and > 0")

    def label(self) -> str:
        """The hyperprior as a sentence, for the assumptions of every answer that uses it."""
        return (
            f"Hyperprior: archive mean log lift ~ Normal(0, {self.mean_sd:g}^2), between-theme sd ~ "
            f"half-normal({self.between_themes_scale:g}), within-theme sd uniform on [0, {self.spread_max:g}]."
        )


DEFAULT_HYPERPRIOR = Hyperprior()
