"""Tables of the results store (SQLAlchemy 2 ORM).

prototype -> revision (label unique within its prototype; notes; design parameters as
key/value rows) -> campaign (manifest text, chamber, files and their SHA-256, the raw
sweeps of every target) -> processing run (settings, software version, time) -> results
(calibrated cubes per target, metrics and checks as queryable rows).

Arrays are stored as ``np.save`` bytes (``allow_pickle=False``), zlib-compressed; complex
data stays complex128 so that reprocessing from the store is exact. The schema is created
and upgraded by the Alembic migrations in ``analysis/migrations`` (keep them in step).
"""

from __future__ import annotations

import datetime as dt

from sqlalchemy import (JSON, Boolean, Date, DateTime, Float, ForeignKey, Integer, LargeBinary, String, Text,
                        UniqueConstraint)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship


class Base(DeclarativeBase):
    pass


class Prototype(Base):
    __tablename__ = "prototype"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str] = mapped_column(String(200), unique=True, nullable=False)
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), nullable=False)
    revisions: Mapped[list["Revision"]] = relationship(back_populates="prototype")


class Revision(Base):
    __tablename__ = "revision"
    __table_args__ = (UniqueConstraint("prototype_id", "label", name="uq_revision_label"),)
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    prototype_id: Mapped[int] = mapped_column(ForeignKey("prototype.id", ondelete="CASCADE"), nullable=False,
                                              index=True)
    label: Mapped[str] = mapped_column(String(200), nullable=False)
    date: Mapped[dt.date | None] = mapped_column(Date)
    notes: Mapped[str] = mapped_column(Text, nullable=False, default="")
    current_run_id: Mapped[int | None] = mapped_column(Integer)  # chosen "current" run; None: the newest
    prototype: Mapped[Prototype] = relationship(back_populates="revisions")
    parameters: Mapped[list["RevisionParameter"]] = relationship(back_populates="revision",
                                                                 cascade="all, delete-orphan")


class RevisionParameter(Base):
    __tablename__ = "revision_parameter"
    __table_args__ = (UniqueConstraint("revision_id", "key", name="uq_revision_parameter_key"),)
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    revision_id: Mapped[int] = mapped_column(ForeignKey("revision.id", ondelete="CASCADE"), nullable=False,
                                             index=True)
    key: Mapped[str] = mapped_column(String(200), nullable=False)
    value: Mapped[str] = mapped_column(Text, nullable=False)
    revision: Mapped[Revision] = relationship(back_populates="parameters")


class Campaign(Base):
    __tablename__ = "campaign"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    prototype_id: Mapped[int] = mapped_column(ForeignKey("prototype.id", ondelete="CASCADE"), nullable=False,
                                              index=True)
    name: Mapped[str] = mapped_column(String(200), nullable=False, index=True)
    date: Mapped[dt.date | None] = mapped_column(Date)
    fingerprint: Mapped[str] = mapped_column(String(64), unique=True, nullable=False)
    manifest_text: Mapped[str] = mapped_column(Text, nullable=False)
    manifest_path: Mapped[str] = mapped_column(Text, nullable=False)
    chamber: Mapped[dict] = mapped_column(JSON, nullable=False)
    frequency_hz: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
    created_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), nullable=False)
    linked_campaign_id: Mapped[int | None] = mapped_column(Integer)  # an earlier campaign with the same raw files


class CampaignTarget(Base):
    """One target's raw sweeps: the complex128 cube (polarization, angle, repeat, frequency)."""

    __tablename__ = "campaign_target"
    __table_args__ = (UniqueConstraint("campaign_id", "name", name="uq_campaign_target_name"),)
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    campaign_id: Mapped[int] = mapped_column(ForeignKey("campaign.id", ondelete="CASCADE"), nullable=False,
                                             index=True)
    revision_id: Mapped[int | None] = mapped_column(ForeignKey("revision.id", ondelete="SET NULL"), index=True)
    position: Mapped[int] = mapped_column(Integer, nullable=False)
    name: Mapped[str] = mapped_column(String(200), nullable=False)
    role: Mapped[str] = mapped_column(String(20), nullable=False)
    date: Mapped[dt.date | None] = mapped_column(Date)
    spec: Mapped[dict] = mapped_column(JSON, nullable=False)
    n_ports: Mapped[int] = mapped_column(Integer, nullable=False)
    parameters: Mapped[dict] = mapped_column(JSON, nullable=False)
    polarizations: Mapped[list] = mapped_column(JSON, nullable=False)
    angles_deg: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
    repeats: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
    data: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
    # the target's frequency grid (Hz) and {flat sweep index: reader warnings without the file's path};
    # None on targets stored before schema revision i15a (their files are then read afresh)
    frequency_hz: Mapped[bytes | None] = mapped_column(LargeBinary)
    file_warnings: Mapped[dict | None] = mapped_column(JSON)


class CampaignFile(Base):
    __tablename__ = "campaign_file"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    campaign_id: Mapped[int] = mapped_column(ForeignKey("campaign.id", ondelete="CASCADE"), nullable=False,
                                             index=True)
    target_id: Mapped[int] = mapped_column(ForeignKey("campaign_target.id", ondelete="CASCADE"), nullable=False)
    path: Mapped[str] = mapped_column(Text, nullable=False)  # relative to the manifest's folder
    sha256: Mapped[str] = mapped_column(String(64), nullable=False, index=True)
    polarization: Mapped[str] = mapped_column(String(2), nullable=False)
    angle_index: Mapped[int] = mapped_column(Integer, nullable=False)
    repeat_index: Mapped[int] = mapped_column(Integer, nullable=False)


class ProcessingRun(Base):
    __tablename__ = "processing_run"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    campaign_id: Mapped[int] = mapped_column(ForeignKey("campaign.id", ondelete="CASCADE"), nullable=False,
                                             index=True)
    processed_at: Mapped[dt.datetime] = mapped_column(DateTime(timezone=True), nullable=False)
    software_version: Mapped[str] = mapped_column(String(50), nullable=False)
    process_settings: Mapped[dict] = mapped_column(JSON, nullable=False)
    settings: Mapped[dict] = mapped_column(JSON, nullable=False)
    manifest_text: Mapped[str] = mapped_column(Text, nullable=False)
    floor: Mapped[dict] = mapped_column(JSON, nullable=False)
    warnings: Mapped[list] = mapped_column(JSON, nullable=False)
    frequency_hz: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
    valid_mask: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
    band_mask: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)


class TargetResultRow(Base):
    """A calibrated target of one run: amplitude (m, complex128), floor (m^2), repeatability."""

    __tablename__ = "target_result"
    __table_args__ = (UniqueConstraint("run_id", "name", name="uq_target_result_name"),)
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("processing_run.id", ondelete="CASCADE"), nullable=False,
                                        index=True)
    position: Mapped[int] = mapped_column(Integer, nullable=False)
    name: Mapped[str] = mapped_column(String(200), nullable=False)
    role: Mapped[str] = mapped_column(String(20), nullable=False)
    revision: Mapped[str] = mapped_column(String(200), nullable=False)
    baseline: Mapped[str | None] = mapped_column(String(200))
    gate: Mapped[dict] = mapped_column(JSON, nullable=False)
    shape: Mapped[dict | None] = mapped_column(JSON)
    polarizations: Mapped[list] = mapped_column(JSON, nullable=False)
    angles_deg: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
    amplitude: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
    floor: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
    rep_rel_u: Mapped[bytes | None] = mapped_column(LargeBinary)


class ReductionRow(Base):
    """Reduction (dB) and bound label per (angle, frequency over the valid band) of a subject."""

    __tablename__ = "reduction"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("processing_run.id", ondelete="CASCADE"), nullable=False,
                                        index=True)
    subject: Mapped[str] = mapped_column(String(200), nullable=False)
    polarization: Mapped[str] = mapped_column(String(2), nullable=False)
    angles_deg: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
    frequency_hz: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
    reduction_db: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
    bound: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)  # int8 codes into BOUND_LABELS


class MetricRow(Base):
    __tablename__ = "metric"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("processing_run.id", ondelete="CASCADE"), nullable=False,
                                        index=True)
    revision_id: Mapped[int | None] = mapped_column(ForeignKey("revision.id", ondelete="SET NULL"), index=True)
    subject: Mapped[str] = mapped_column(String(200), nullable=False)
    baseline: Mapped[str] = mapped_column(String(200), nullable=False)
    revision: Mapped[str] = mapped_column(String(200), nullable=False)
    polarization: Mapped[str] = mapped_column(String(2), nullable=False)
    band_reduction_db: Mapped[float | None] = mapped_column(Float)
    band_reduction_uncertainty_db: Mapped[float | None] = mapped_column(Float)
    best_reduction_db: Mapped[float | None] = mapped_column(Float)
    best_frequency_hz: Mapped[float | None] = mapped_column(Float)
    bandwidth_hz: Mapped[float | None] = mapped_column(Float)
    bandwidth_start_hz: Mapped[float | None] = mapped_column(Float)
    bandwidth_stop_hz: Mapped[float | None] = mapped_column(Float)
    bandwidth_truncated: Mapped[bool | None] = mapped_column(Boolean)
    fractional_bandwidth: Mapped[float | None] = mapped_column(Float)
    worst_angle_deg: Mapped[float | None] = mapped_column(Float)
    worst_angle_reduction_db: Mapped[float | None] = mapped_column(Float)
    bound: Mapped[str] = mapped_column(String(20), nullable=False)
    floor_limited_points: Mapped[int] = mapped_column(Integer, nullable=False)
    points: Mapped[int] = mapped_column(Integer, nullable=False)
    mounting_offset_deg: Mapped[float | None] = mapped_column(Float)
    check_error_db: Mapped[float | None] = mapped_column(Float)
    extra: Mapped[dict] = mapped_column(JSON, nullable=False)  # the remaining keys (sector curve, ...)


class CheckRow(Base):
    __tablename__ = "check_result"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("processing_run.id", ondelete="CASCADE"), nullable=False,
                                        index=True)
    target: Mapped[str] = mapped_column(String(200), nullable=False)
    polarization: Mapped[str] = mapped_column(String(2), nullable=False)
    max_error_db: Mapped[float | None] = mapped_column(Float)
    rms_error_db: Mapped[float | None] = mapped_column(Float)
    mean_error_db: Mapped[float | None] = mapped_column(Float)
    tolerance_db: Mapped[float] = mapped_column(Float, nullable=False)
    passed: Mapped[bool] = mapped_column(Boolean, nullable=False)
    points: Mapped[int] = mapped_column(Integer, nullable=False)
    extra: Mapped[dict] = mapped_column(JSON, nullable=False)  # shape, error_curve_db


class ScatteringCentreRow(Base):
    """A scattering centre of a subject's image (cloakrcs.imaging): one row per centre, strongest first."""

    __tablename__ = "scattering_centre"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("processing_run.id", ondelete="CASCADE"), nullable=False,
                                        index=True)
    target: Mapped[str] = mapped_column(String(200), nullable=False)
    revision: Mapped[str] = mapped_column(String(200), nullable=False)
    polarization: Mapped[str] = mapped_column(String(2), nullable=False)
    rank: Mapped[int] = mapped_column(Integer, nullable=False)
    down_range_m: Mapped[float] = mapped_column(Float, nullable=False)
    cross_range_m: Mapped[float] = mapped_column(Float, nullable=False)
    rcs_dbsm: Mapped[float] = mapped_column(Float, nullable=False)
    floor_limited: Mapped[bool] = mapped_column(Boolean, nullable=False)
    down_range_resolution_m: Mapped[float] = mapped_column(Float, nullable=False)
    cross_range_resolution_m: Mapped[float] = mapped_column(Float, nullable=False)
    extra: Mapped[dict] = mapped_column(JSON, nullable=False)  # sector, band, method, window, image floor
