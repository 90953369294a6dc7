"""The engine side: fed readings, ticks and commands with ``now``; returns effects; no I/O.

See :mod:`thermowarden.engine.engine` for the path the data takes through the modules.
"""

from thermowarden.core.json_values import iso
from thermowarden.engine.advisory import Advisory
from thermowarden.engine.commands import CommandError
from thermowarden.engine.engine import Engine
from thermowarden.engine.rule_runtime import RuleRuntime

__all__ = ["Advisory", "CommandError", "Engine", "RuleRuntime", "iso"]
