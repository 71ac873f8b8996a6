"""Sidestep: collision-free traverse planning for XY gantry machines."""

__version__ = "0.1.0"
