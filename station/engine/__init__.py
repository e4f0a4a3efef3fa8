"""The run engine: inputs to outcome, the state table, step handlers, waiting, safing, resume."""
