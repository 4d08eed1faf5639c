"""Per-target frequency grid and reader warnings, so a reprocessing run can take unchanged sweeps
from the store instead of parsing their files again.

Both columns are nullable: targets stored before this revision have neither, and their files are
read afresh.

Revision ID: i15a
Revises: i17a
"""

import sqlalchemy as sa
from alembic import op

revision = "i15a"
down_revision = "i17a"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("campaign_target") as batch:
        batch.add_column(sa.Column("frequency_hz", sa.LargeBinary, nullable=True))
        batch.add_column(sa.Column("file_warnings", sa.JSON, nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("campaign_target") as batch:
        batch.drop_column("file_warnings")
        batch.drop_column("frequency_hz")
