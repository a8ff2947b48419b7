"""Kinetics: waiting times, rates and growth velocity from the event table."""
