"""Typed errors of the simulation (bad specifications exit with code 2)."""

from __future__ import annotations

from ..errors import ConfigError


class SimulationConfigError(ConfigError):
    """A simulation setting or policy specification that cannot be run; the message says why."""
