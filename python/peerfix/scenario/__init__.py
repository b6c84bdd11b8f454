"""Scenario files: the folder format every engine and tool reads and writes."""

from .model import RangeTable, RangingModel, Scenario, Site, Truth
from .reader import read_scenario
from .writer import write_scenario

__all__ = [
    "RangeTable",
    "RangingModel",
    "Scenario",
    "Site",
    "Truth",
    "read_scenario",
    "write_scenario",
]
