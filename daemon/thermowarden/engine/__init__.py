"""The engine side: fed readings, ticks and commands with ``now``; returns effects; no I/O.

See :mod:`thermowarden.engine.engine` for the path the data takes through the modules.
"""

from thermowarden.engine.advisories import Advisory, CommandError, RuleRuntime
from thermowarden.engine.engine import Engine
from thermowarden.engine.publication import iso

__all__ = ["Advisory", "CommandError", "Engine", "RuleRuntime", "iso"]
