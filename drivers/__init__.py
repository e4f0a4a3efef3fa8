"""Instrument interfaces, transports and drivers. Knows nothing of recipes, runs or analysis."""
