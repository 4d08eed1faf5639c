"""Scattering centres of each subject's image, per run (issue 17).

Revision ID: i17a
Revises: 0001
"""

import sqlalchemy as sa
from alembic import op

revision = "i17a"
down_revision = "i13a"  # after the current-run and campaign-link columns
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "scattering_centre",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("run_id", sa.Integer, sa.ForeignKey("processing_run.id", ondelete="CASCADE"), nullable=False),
        sa.Column("target", sa.String(200), nullable=False),
        sa.Column("revision", sa.String(200), nullable=False),
        sa.Column("polarization", sa.String(2), nullable=False),
        sa.Column("rank", sa.Integer, nullable=False),
        sa.Column("down_range_m", sa.Float, nullable=False),
        sa.Column("cross_range_m", sa.Float, nullable=False),
        sa.Column("rcs_dbsm", sa.Float, nullable=False),
        sa.Column("floor_limited", sa.Boolean, nullable=False),
        sa.Column("down_range_resolution_m", sa.Float, nullable=False),
        sa.Column("cross_range_resolution_m", sa.Float, nullable=False),
        sa.Column("extra", sa.JSON, nullable=False))
    op.create_index("ix_scattering_centre_run_id", "scattering_centre", ["run_id"])


def downgrade() -> None:
    op.drop_index("ix_scattering_centre_run_id", table_name="scattering_centre")
    op.drop_table("scattering_centre")
