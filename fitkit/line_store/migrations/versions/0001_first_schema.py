"""First schema: captures and their measured values.

Revision ID: 0001
Revises:
"""

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "captures",
        sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
        sa.Column("file_sha256", sa.String(64), nullable=False),
        sa.Column("analysis", sa.String(200), nullable=False),
        sa.Column("design_name", sa.String(300)),
        sa.Column("design_sha256", sa.String(64)),
        sa.Column("board_serial", sa.String(100)),
        sa.Column("serial_source", sa.String(200), nullable=False),
        sa.Column("captured_at", sa.DateTime),
        sa.Column("time_source", sa.String(200), nullable=False),
        sa.Column("fixture", sa.String(200), nullable=False),
        sa.Column("file_name", sa.String(1000), nullable=False),
        sa.Column("status", sa.String(20), nullable=False),
        sa.Column("verdict", sa.String(20)),
        sa.Column("model", sa.String(60)),
        sa.Column("reason", sa.Text, nullable=False),
        sa.Column("warnings", sa.Text, nullable=False),
        sa.Column("fitkit_version", sa.String(40), nullable=False),
        sa.Column("stored_at", sa.DateTime, nullable=False),
        sa.UniqueConstraint("file_sha256", "analysis", name="one_row_per_file_and_analysis"),
    )
    op.create_index("captures_by_design_and_time", "captures", ["design_name", "captured_at"])
    op.create_index("captures_by_serial", "captures", ["board_serial"])
    op.create_table(
        "capture_values",
        sa.Column("capture_id", sa.Integer, sa.ForeignKey("captures.id", ondelete="CASCADE"), primary_key=True),
        sa.Column("kind", sa.String(20), primary_key=True),
        sa.Column("name", sa.String(100), primary_key=True),
        sa.Column("value", sa.Float),
        sa.Column("ci_low", sa.Float),
        sa.Column("ci_high", sa.Float),
        sa.Column("unit", sa.String(20), nullable=False),
        sa.Column("determined", sa.Boolean, nullable=False),
        sa.Column("limit_low", sa.Float),
        sa.Column("limit_high", sa.Float),
        sa.Column("nominal", sa.Float),
        sa.Column("verdict", sa.String(30)),
    )


def downgrade() -> None:
    op.drop_table("capture_values")
    op.drop_index("captures_by_serial", "captures")
    op.drop_index("captures_by_design_and_time", "captures")
    op.drop_table("captures")
