"""Methods of the ipopt family (registered with decomp.registry on import)."""
