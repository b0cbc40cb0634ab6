"""Pyomo formulations."""
