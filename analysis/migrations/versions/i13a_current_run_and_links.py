"""A revision's chosen current run, and a campaign's link to another holding the same raw files.

Revision ID: i13a
Revises: 0001
"""

import sqlalchemy as sa
from alembic import op

revision = "i13a"
down_revision = "0001"
branch_labels = None
depends_on = None


def upgrade() -> None:
    # plain integers (no foreign key: SQLite cannot add one to an existing table); a run or
    # campaign that no longer exists is ignored where these are read
    op.add_column("revision", sa.Column("current_run_id", sa.Integer, nullable=True))
    op.add_column("campaign", sa.Column("linked_campaign_id", sa.Integer, nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("campaign") as batch:
        batch.drop_column("linked_campaign_id")
    with op.batch_alter_table("revision") as batch:
        batch.drop_column("current_run_id")
