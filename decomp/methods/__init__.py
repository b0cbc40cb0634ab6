"""Solution methods. Each module registers its classes with decomp.registry."""
