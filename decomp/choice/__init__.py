"""Customer choice: products sold in markets, customers choosing among the open ones by logit.

Modules: :mod:`.data` (the markets table and the product columns, their checks,
reading and writing), :mod:`.generate` (networks with markets).
"""

from .data import Markets, require, with_markets

__all__ = ["Markets", "require", "with_markets"]
