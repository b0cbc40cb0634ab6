"""Methods of the lagrangian family (registered with decomp.registry on import)."""
