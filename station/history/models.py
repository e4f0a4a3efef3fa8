"""The history's tables: a run, the figures it measured and the verdicts it reached.

``runs.run_uid`` is unique: indexing the same run folder twice, or from two processes at once,
records it once (the insert does nothing on conflict). Schema changes go through a new Alembic
revision in migrations/versions/, never through ``create_all``.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from sqlalchemy import JSON, DateTime, Float, ForeignKey, Index, Integer, String, Text
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship


class Base(DeclarativeBase):
    pass


class Run(Base):
    __tablename__ = "runs"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    run_uid: Mapped[str] = mapped_column(String(200), unique=True, nullable=False)
    folder: Mapped[str] = mapped_column(Text, nullable=False)
    uut_model: Mapped[str] = mapped_column(String(120), default="")
    uut_serial: Mapped[str] = mapped_column(String(120), default="")
    station: Mapped[str] = mapped_column(String(200), default="")
    recipe: Mapped[str] = mapped_column(String(120), default="")
    host: Mapped[str] = mapped_column(String(120), default="")
    software_version: Mapped[str] = mapped_column(String(40), default="")
    started_at: Mapped[dt.datetime | None] = mapped_column(DateTime, nullable=True)
    ended_at: Mapped[dt.datetime | None] = mapped_column(DateTime, nullable=True)
    state: Mapped[str] = mapped_column(String(20), default="")
    cause: Mapped[str] = mapped_column(Text, default="")
    outcome: Mapped[str] = mapped_column(String(20), default="")
    n_pass: Mapped[int] = mapped_column(Integer, default=0)
    n_marginal: Mapped[int] = mapped_column(Integer, default=0)
    n_fail: Mapped[int] = mapped_column(Integer, default=0)
    indexed_at: Mapped[dt.datetime] = mapped_column(DateTime, nullable=False)

    figures: Mapped[list[FigureRow]] = relationship(back_populates="run",
                                                    cascade="all, delete-orphan")
    verdicts: Mapped[list[VerdictEntry]] = relationship(back_populates="run",
                                                        cascade="all, delete-orphan")

    __table_args__ = (Index("ix_runs_model_started", "uut_model", "started_at"),
                      Index("ix_runs_serial", "uut_serial"))


class FigureRow(Base):
    __tablename__ = "figures"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("runs.id", ondelete="CASCADE"), nullable=False)
    name: Mapped[str] = mapped_column(String(200), nullable=False)
    analysis: Mapped[str] = mapped_column(String(80), default="")
    value: Mapped[float] = mapped_column(Float, nullable=False)
    sigma: Mapped[float | None] = mapped_column(Float, nullable=True)
    unit: Mapped[str] = mapped_column(String(40), default="")

    run: Mapped[Run] = relationship(back_populates="figures")

    __table_args__ = (Index("ix_figures_name_run", "name", "run_id"),)


class VerdictEntry(Base):
    __tablename__ = "verdicts"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("runs.id", ondelete="CASCADE"), nullable=False)
    key: Mapped[str] = mapped_column(String(120), nullable=False)
    quantity: Mapped[str] = mapped_column(String(200), default="")
    analysis: Mapped[str] = mapped_column(String(80), default="")
    value: Mapped[float | None] = mapped_column(Float, nullable=True)
    sigma: Mapped[float | None] = mapped_column(Float, nullable=True)
    unit: Mapped[str] = mapped_column(String(40), default="")
    limit: Mapped[float | None] = mapped_column(Float, nullable=True)
    sense: Mapped[str] = mapped_column(String(8), default="max")
    margin: Mapped[float | None] = mapped_column(Float, nullable=True)
    status: Mapped[str] = mapped_column(String(12), nullable=False)
    conditions: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)

    run: Mapped[Run] = relationship(back_populates="verdicts")

    __table_args__ = (Index("ix_verdicts_key_run", "key", "run_id"),)
