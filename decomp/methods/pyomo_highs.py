"""Methods of the pyomo_highs family (registered with decomp.registry on import)."""
