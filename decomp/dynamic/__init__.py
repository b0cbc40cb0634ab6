"""Capacity- and time-dependent bid prices: the network's dynamic program, decomposed by leg.

Modules, one per idea:

* :mod:`.demand`: requests over booking periods (``PeriodDemand``), from the
  published problems' probabilities or from the simulation's arrival curves;
* :mod:`.legdp`: the single-leg dynamic program and its bid-price table;
* :mod:`.decomposition`: the decomposition by leg from static bid prices
  (Talluri and van Ryzin 2004, section 3.4);
* :mod:`.relaxation`: the Lagrangian relaxation of the network program and
  the minimization of its bound (Topaloglu 2009);
* :mod:`.tables`: the tables (leg, period, seats remaining, bid price) and
  their Parquet files.

Only a static result's bid prices are consumed (``SolveResult.bid_price_array``),
so any method of :func:`decomp.solve` can feed the tables.
"""

from .decomposition import decompose
from .demand import DemandError, PeriodDemand, from_arrival_curves
from .legdp import LegSolution, solve_leg
from .relaxation import RelaxationResult, relax
from .tables import BidPriceTables, read_parquet, write_parquet

__all__ = ["BidPriceTables", "DemandError", "LegSolution", "PeriodDemand", "RelaxationResult", "decompose",
           "from_arrival_curves", "read_parquet", "relax", "solve_leg", "write_parquet"]
