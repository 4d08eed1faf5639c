"""Initial schema: prototype, revision, campaign, raw sweeps, runs, results.

Revision ID: 0001
Revises:
"""

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def _id():
    return sa.Column("id", sa.Integer, primary_key=True)


def _fk(name, target, ondelete="CASCADE", nullable=False):
    return sa.Column(name, sa.Integer, sa.ForeignKey(target, ondelete=ondelete), nullable=nullable)


def upgrade() -> None:
    op.create_table(
        "prototype", _id(),
        sa.Column("name", sa.String(200), nullable=False, unique=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False))
    op.create_table(
        "revision", _id(), _fk("prototype_id", "prototype.id"),
        sa.Column("label", sa.String(200), nullable=False),
        sa.Column("date", sa.Date),
        sa.Column("notes", sa.Text, nullable=False),
        sa.UniqueConstraint("prototype_id", "label", name="uq_revision_label"))
    op.create_index("ix_revision_prototype_id", "revision", ["prototype_id"])
    op.create_table(
        "revision_parameter", _id(), _fk("revision_id", "revision.id"),
        sa.Column("key", sa.String(200), nullable=False),
        sa.Column("value", sa.Text, nullable=False),
        sa.UniqueConstraint("revision_id", "key", name="uq_revision_parameter_key"))
    op.create_index("ix_revision_parameter_revision_id", "revision_parameter", ["revision_id"])
    op.create_table(
        "campaign", _id(), _fk("prototype_id", "prototype.id"),
        sa.Column("name", sa.String(200), nullable=False),
        sa.Column("date", sa.Date),
        sa.Column("fingerprint", sa.String(64), nullable=False, unique=True),
        sa.Column("manifest_text", sa.Text, nullable=False),
        sa.Column("manifest_path", sa.Text, nullable=False),
        sa.Column("chamber", sa.JSON, nullable=False),
        sa.Column("frequency_hz", sa.LargeBinary, nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False))
    op.create_index("ix_campaign_prototype_id", "campaign", ["prototype_id"])
    op.create_index("ix_campaign_name", "campaign", ["name"])
    op.create_table(
        "campaign_target", _id(), _fk("campaign_id", "campaign.id"),
        _fk("revision_id", "revision.id", ondelete="SET NULL", nullable=True),
        sa.Column("position", sa.Integer, nullable=False),
        sa.Column("name", sa.String(200), nullable=False),
        sa.Column("role", sa.String(20), nullable=False),
        sa.Column("date", sa.Date),
        sa.Column("spec", sa.JSON, nullable=False),
        sa.Column("n_ports", sa.Integer, nullable=False),
        sa.Column("parameters", sa.JSON, nullable=False),
        sa.Column("polarizations", sa.JSON, nullable=False),
        sa.Column("angles_deg", sa.LargeBinary, nullable=False),
        sa.Column("repeats", sa.LargeBinary, nullable=False),
        sa.Column("data", sa.LargeBinary, nullable=False),
        sa.UniqueConstraint("campaign_id", "name", name="uq_campaign_target_name"))
    op.create_index("ix_campaign_target_campaign_id", "campaign_target", ["campaign_id"])
    op.create_index("ix_campaign_target_revision_id", "campaign_target", ["revision_id"])
    op.create_table(
        "campaign_file", _id(), _fk("campaign_id", "campaign.id"), _fk("target_id", "campaign_target.id"),
        sa.Column("path", sa.Text, nullable=False),
        sa.Column("sha256", sa.String(64), nullable=False),
        sa.Column("polarization", sa.String(2), nullable=False),
        sa.Column("angle_index", sa.Integer, nullable=False),
        sa.Column("repeat_index", sa.Integer, nullable=False))
    op.create_index("ix_campaign_file_campaign_id", "campaign_file", ["campaign_id"])
    op.create_index("ix_campaign_file_sha256", "campaign_file", ["sha256"])
    op.create_table(
        "processing_run", _id(), _fk("campaign_id", "campaign.id"),
        sa.Column("processed_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("software_version", sa.String(50), nullable=False),
        sa.Column("process_settings", sa.JSON, nullable=False),
        sa.Column("settings", sa.JSON, nullable=False),
        sa.Column("manifest_text", sa.Text, nullable=False),
        sa.Column("floor", sa.JSON, nullable=False),
        sa.Column("warnings", sa.JSON, nullable=False),
        sa.Column("frequency_hz", sa.LargeBinary, nullable=False),
        sa.Column("valid_mask", sa.LargeBinary, nullable=False),
        sa.Column("band_mask", sa.LargeBinary, nullable=False))
    op.create_index("ix_processing_run_campaign_id", "processing_run", ["campaign_id"])
    op.create_table(
        "target_result", _id(), _fk("run_id", "processing_run.id"),
        sa.Column("position", sa.Integer, nullable=False),
        sa.Column("name", sa.String(200), nullable=False),
        sa.Column("role", sa.String(20), nullable=False),
        sa.Column("revision", sa.String(200), nullable=False),
        sa.Column("baseline", sa.String(200)),
        sa.Column("gate", sa.JSON, nullable=False),
        sa.Column("shape", sa.JSON),
        sa.Column("polarizations", sa.JSON, nullable=False),
        sa.Column("angles_deg", sa.LargeBinary, nullable=False),
        sa.Column("amplitude", sa.LargeBinary, nullable=False),
        sa.Column("floor", sa.LargeBinary, nullable=False),
        sa.Column("rep_rel_u", sa.LargeBinary),
        sa.UniqueConstraint("run_id", "name", name="uq_target_result_name"))
    op.create_index("ix_target_result_run_id", "target_result", ["run_id"])
    op.create_table(
        "reduction", _id(), _fk("run_id", "processing_run.id"),
        sa.Column("subject", sa.String(200), nullable=False),
        sa.Column("polarization", sa.String(2), nullable=False),
        sa.Column("angles_deg", sa.LargeBinary, nullable=False),
        sa.Column("frequency_hz", sa.LargeBinary, nullable=False),
        sa.Column("reduction_db", sa.LargeBinary, nullable=False),
        sa.Column("bound", sa.LargeBinary, nullable=False))
    op.create_index("ix_reduction_run_id", "reduction", ["run_id"])
    op.create_table(
        "metric", _id(), _fk("run_id", "processing_run.id"),
        _fk("revision_id", "revision.id", ondelete="SET NULL", nullable=True),
        sa.Column("subject", sa.String(200), nullable=False),
        sa.Column("baseline", sa.String(200), nullable=False),
        sa.Column("revision", sa.String(200), nullable=False),
        sa.Column("polarization", sa.String(2), nullable=False),
        *[sa.Column(name, sa.Float) for name in (
            "band_reduction_db", "band_reduction_uncertainty_db", "best_reduction_db", "best_frequency_hz",
            "bandwidth_hz", "bandwidth_start_hz", "bandwidth_stop_hz")],
        sa.Column("bandwidth_truncated", sa.Boolean),
        sa.Column("fractional_bandwidth", sa.Float),
        sa.Column("worst_angle_deg", sa.Float),
        sa.Column("worst_angle_reduction_db", sa.Float),
        sa.Column("bound", sa.String(20), nullable=False),
        sa.Column("floor_limited_points", sa.Integer, nullable=False),
        sa.Column("points", sa.Integer, nullable=False),
        sa.Column("mounting_offset_deg", sa.Float),
        sa.Column("check_error_db", sa.Float),
        sa.Column("extra", sa.JSON, nullable=False))
    op.create_index("ix_metric_run_id", "metric", ["run_id"])
    op.create_index("ix_metric_revision_id", "metric", ["revision_id"])
    op.create_table(
        "check_result", _id(), _fk("run_id", "processing_run.id"),
        sa.Column("target", sa.String(200), nullable=False),
        sa.Column("polarization", sa.String(2), nullable=False),
        sa.Column("max_error_db", sa.Float),
        sa.Column("rms_error_db", sa.Float),
        sa.Column("mean_error_db", sa.Float),
        sa.Column("tolerance_db", sa.Float, nullable=False),
        sa.Column("passed", sa.Boolean, nullable=False),
        sa.Column("points", sa.Integer, nullable=False),
        sa.Column("extra", sa.JSON, nullable=False))
    op.create_index("ix_check_result_run_id", "check_result", ["run_id"])


def downgrade() -> None:
    for table in ("check_result", "metric", "reduction", "target_result", "processing_run", "campaign_file",
                  "campaign_target", "campaign", "revision_parameter", "revision", "prototype"):
        op.drop_table(table)
