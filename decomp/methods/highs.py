"""Methods of the highs family (registered with decomp.registry on import)."""
