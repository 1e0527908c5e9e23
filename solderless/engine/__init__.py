"""Solderless engine: circuit model, parsing, devices, solver, live host, analyses."""
__version__ = "0.1.0"
