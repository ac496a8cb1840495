"""Streaming event detectors: brownout, dropout, overvoltage, overcurrent, flicker; and the event record."""

from logger.events.detector import EventDetector
from logger.events.model import KINDS, Event
from logger.events.rules import DEFAULTS, rules_for

__all__ = ["DEFAULTS", "KINDS", "Event", "EventDetector", "rules_for"]
