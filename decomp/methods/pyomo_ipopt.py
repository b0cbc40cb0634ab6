"""Methods of the pyomo_ipopt family (registered with decomp.registry on import)."""
