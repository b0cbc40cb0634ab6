"""Booking simulation: what a model, a method and a tolerance earn.

    >>> from decomp.simulation import SimulationConfig, simulate
    >>> cfg = SimulationConfig(policies="pnlp:lagrangian:1e-9,dlp:highs,fcfs", paths=200)
    >>> result = simulate(instance, cfg)
    >>> result.summary()["scenarios"][0]["policies"][0]["revenue"]   # mean, halfwidth, low, high, n

Modules: :mod:`.booking` (the request process), :mod:`.forecast` (what the
optimizer is told), :mod:`.policies` (controls and their specifications),
:mod:`.controller` (the lockstep acceptance loop), :mod:`.hindsight` (the
perfect-hindsight bound), :mod:`.statistics`, :mod:`.run` (scenarios, batches,
sequential stopping), :mod:`.report` (tables, JSON, plots), :mod:`.cluster`.
"""

from .booking import BookingCurve, fare_rank, remaining_forecast, sample_paths, sample_totals
from .errors import SimulationConfigError
from .forecast import ForecastError
from .policies import (BidPricePolicy, FCFSPolicy, NestedPolicy, PartitionedPolicy, emsrb_levels, parse_policies,
                       parse_policy)
from .run import SimulationConfig, SimulationResult, revenue_for_bid_prices, simulate

__all__ = [
    "BidPricePolicy", "BookingCurve", "FCFSPolicy", "ForecastError", "NestedPolicy", "PartitionedPolicy",
    "SimulationConfig", "SimulationConfigError", "SimulationResult", "emsrb_levels", "fare_rank",
    "parse_policies", "parse_policy", "remaining_forecast", "revenue_for_bid_prices", "sample_paths",
    "sample_totals", "simulate",
]
