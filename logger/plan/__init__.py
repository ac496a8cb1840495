"""Front-end planner: size a divider, a shunt's gain and a meter's Zener feed, with preferred values.

``railtap plan`` is wired in by :func:`add_plan_command`; every mistake or impossible request is a one-line
:class:`PlanError`. The planner knows nothing of the rest of railtap: it only writes rig-file lines as text.
"""

from __future__ import annotations

from logger.plan.command import add_plan_command
from logger.plan.values import PlanError

__all__ = ["PlanError", "add_plan_command"]
