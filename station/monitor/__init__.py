"""A live web monitor for runs: its own process, reading run folders (see app.py)."""
