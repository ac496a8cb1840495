"""Acting on events without a broker: a command run as each event of chosen kinds ends.

``runner.py`` runs the commands (no shell, a few at a time, each within a time limit, the event in the
environment through ``environ.py``) and takes events as plain mappings, so anything that hears of events can
use it; ``outlet.py`` is the pipeline's outlet that feeds it a run's events; ``command.py`` the command line's
``--on-event KINDS -- COMMAND``.
"""

from __future__ import annotations

from logger.act.environ import PREFIX, environment
from logger.act.outlet import CommandOutlet, event_fields
from logger.act.runner import ActError, CommandRunner, Tally, parse_kinds

__all__ = ["PREFIX", "ActError", "CommandOutlet", "CommandRunner", "Tally", "environment", "event_fields",
           "parse_kinds"]
