"""One family of errors for everything beadmd reports to a user.

The command line turns any :class:`BeadmdError` into a one-paragraph message and
exit code 2; library users catch the subclass they care about.
"""

from __future__ import annotations


class BeadmdError(Exception):
    """Base class of every error beadmd raises on purpose."""


class ConfigError(BeadmdError, ValueError):
    """A parameter is invalid: the message names it, its value and what is allowed."""


class SimulationError(BeadmdError, RuntimeError):
    """A run cannot go on (non-finite numbers, a broken bond): names step, beads, likely cause."""


class DataError(BeadmdError, ValueError):
    """Stored data (trajectory, checkpoint, table) is missing, corrupt or inconsistent."""


def require(condition: bool, name: str, value: object, allowed: str) -> None:
    """Raise :class:`ConfigError` naming ``name``, ``value`` and ``allowed`` unless ``condition``."""
    if not condition:
        raise ConfigError(f"{name} = {value!r} is not allowed: {allowed}")
