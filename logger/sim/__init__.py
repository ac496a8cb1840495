"""The simulated rig: a device that speaks the wire protocol, fed by a swappable physics model."""

from logger.sim.device import LinkFaults, LinkTruth, RigModel, SimDevice
from logger.sim.simple import DEFAULT_SCRIPT, ScriptedFault, SimpleRail

__all__ = [
    "DEFAULT_SCRIPT",
    "LinkFaults",
    "LinkTruth",
    "RigModel",
    "ScriptedFault",
    "SimDevice",
    "SimpleRail",
]
