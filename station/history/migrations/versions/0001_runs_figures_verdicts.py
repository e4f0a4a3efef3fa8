"""runs, figures and verdicts

Revision ID: 0001
Revises:
Create Date: 2026-12-02
"""
from alembic import op
import sqlalchemy as sa

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "runs",
        sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
        sa.Column("run_uid", sa.String(200), nullable=False),
        sa.Column("folder", sa.Text, nullable=False),
        sa.Column("uut_model", sa.String(120), nullable=False, server_default=""),
        sa.Column("uut_serial", sa.String(120), nullable=False, server_default=""),
        sa.Column("station", sa.String(200), nullable=False, server_default=""),
        sa.Column("recipe", sa.String(120), nullable=False, server_default=""),
        sa.Column("host", sa.String(120), nullable=False, server_default=""),
        sa.Column("software_version", sa.String(40), nullable=False, server_default=""),
        sa.Column("started_at", sa.DateTime, nullable=True),
        sa.Column("ended_at", sa.DateTime, nullable=True),
        sa.Column("state", sa.String(20), nullable=False, server_default=""),
        sa.Column("cause", sa.Text, nullable=False, server_default=""),
        sa.Column("outcome", sa.String(20), nullable=False, server_default=""),
        sa.Column("n_pass", sa.Integer, nullable=False, server_default="0"),
        sa.Column("n_marginal", sa.Integer, nullable=False, server_default="0"),
        sa.Column("n_fail", sa.Integer, nullable=False, server_default="0"),
        sa.Column("indexed_at", sa.DateTime, nullable=False),
        sa.UniqueConstraint("run_uid", name="uq_runs_run_uid"),
    )
    op.create_index("ix_runs_model_started", "runs", ["uut_model", "started_at"])
    op.create_index("ix_runs_serial", "runs", ["uut_serial"])
    op.create_table(
        "figures",
        sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
        sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id", ondelete="CASCADE"),
                  nullable=False),
        sa.Column("name", sa.String(200), nullable=False),
        sa.Column("analysis", sa.String(80), nullable=False, server_default=""),
        sa.Column("value", sa.Float, nullable=False),
        sa.Column("sigma", sa.Float, nullable=True),
        sa.Column("unit", sa.String(40), nullable=False, server_default=""),
    )
    op.create_index("ix_figures_name_run", "figures", ["name", "run_id"])
    op.create_table(
        "verdicts",
        sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
        sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id", ondelete="CASCADE"),
                  nullable=False),
        sa.Column("key", sa.String(120), nullable=False),
        sa.Column("quantity", sa.String(200), nullable=False, server_default=""),
        sa.Column("analysis", sa.String(80), nullable=False, server_default=""),
        sa.Column("value", sa.Float, nullable=True),
        sa.Column("sigma", sa.Float, nullable=True),
        sa.Column("unit", sa.String(40), nullable=False, server_default=""),
        sa.Column("limit", sa.Float, nullable=True),
        sa.Column("sense", sa.String(8), nullable=False, server_default="max"),
        sa.Column("margin", sa.Float, nullable=True),
        sa.Column("status", sa.String(12), nullable=False),
        sa.Column("conditions", sa.JSON, nullable=False),
    )
    op.create_index("ix_verdicts_key_run", "verdicts", ["key", "run_id"])


def downgrade() -> None:
    op.drop_table("verdicts")
    op.drop_table("figures")
    op.drop_table("runs")
