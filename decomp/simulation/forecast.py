"""What the optimizer is told: the true forecast with a bias and a factor on std.

The booking process always draws from the instance's own (true) forecast; the
policies' optimizations see ``mean * (1 + bias_j)`` and ``std * sigma_factor``,
where ``bias_j = bias`` for every product (aggregate error) or, with
``spread > 0``, ``bias + spread * Z_j`` with ``Z_j`` standard normal drawn once
from the seed (per-product error; biased means are floored at zero).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from .booking import STREAM_FORECAST
from .errors import SimulationConfigError


@dataclasses.dataclass(frozen=True)
class ForecastError:
    bias: float = 0.0
    sigma_factor: float = 1.0
    spread: float = 0.0

    def __post_init__(self):
        for name in ("bias", "sigma_factor", "spread"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and math.isfinite(v)):
                raise SimulationConfigError(f"forecast error: {name} must be a finite number, got {v!r}")
        if self.bias <= -1.0:
            raise SimulationConfigError(f"forecast error: bias must be > -1 (mean * (1 + bias) >= 0), got {self.bias!r}")
        if self.sigma_factor < 0:
            raise SimulationConfigError(f"forecast error: sigma factor must be >= 0, got {self.sigma_factor!r}")
        if self.spread < 0:
            raise SimulationConfigError(f"forecast error: bias spread must be >= 0, got {self.spread!r}")

    @property
    def exact(self) -> bool:
        return self.bias == 0.0 and self.sigma_factor == 1.0 and self.spread == 0.0

    def apply(self, mean, std, seed: int):
        """The optimizer's (mean, std) arrays."""
        mean = np.asarray(mean, dtype=np.float64)
        bias = np.full(mean.shape, float(self.bias))
        if self.spread > 0:
            rng = np.random.default_rng(np.random.SeedSequence(int(seed), spawn_key=(STREAM_FORECAST,)))
            bias = bias + self.spread * rng.standard_normal(mean.shape)
        return np.maximum(mean * (1.0 + bias), 0.0), np.asarray(std, dtype=np.float64) * self.sigma_factor

    def label(self) -> str:
        s = f"bias={self.bias:g}, sigma x{self.sigma_factor:g}"
        return s + (f", spread={self.spread:g}" if self.spread else "")

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)
