"""The runtime that glues drivers, simulators, sequences and analysis together."""

__version__ = "0.1.0"
