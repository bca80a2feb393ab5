"""Typed job configurations and the Hydra entry point.

Holds:
    schema -- the dataclass schemas of every config group and job (validated on conversion).
    hydra_entry -- compose, validate and run a job through Hydra with one-line errors.
"""
