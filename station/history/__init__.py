"""The run history: every finished run, its figures and verdicts, in one database.

SQLite (a file beside the run folders) by default; PostgreSQL for a lab with several benches.
One toolkit for both (SQLAlchemy 2), the schema versioned with Alembic migrations shipped here.
"""
