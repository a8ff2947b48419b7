"""Kinetics: waiting times, rates and growth velocity from the event table."""

from reviewer.kinetics.read import read_events
from reviewer.kinetics.summary import summarise

__all__ = ["read_events", "summarise"]
