"""The run record on disk: run folder, atomic writes, event log, journal, frames, manifest, verify."""
