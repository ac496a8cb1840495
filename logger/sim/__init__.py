"""The simulated rig: a device that speaks the wire protocol, fed by a swappable physics model.

``SimpleRail`` is the small default model; :func:`load_scenario` gives rigs with real physics (supply,
electronic load, a self-powered meter, a real ADC) and the ground truth of what they did.
"""

from logger.panel_meter import MeterCircuit
from logger.sim.device import LinkFaults, LinkTruth, RigModel, SimDevice
from logger.sim.meter import MeterNode, Switch
from logger.sim.model import PhysicalRig
from logger.sim.scenario import Scenario, load_scenario, scenario_names
from logger.sim.simple import DEFAULT_SCRIPT, ScriptedFault, SimpleRail
from logger.sim.spec import ScenarioError
from logger.sim.truth import TrueEvent

__all__ = [
    "DEFAULT_SCRIPT",
    "LinkFaults",
    "LinkTruth",
    "MeterCircuit",
    "MeterNode",
    "PhysicalRig",
    "RigModel",
    "Scenario",
    "ScenarioError",
    "ScriptedFault",
    "SimDevice",
    "SimpleRail",
    "Switch",
    "TrueEvent",
    "load_scenario",
    "scenario_names",
]
