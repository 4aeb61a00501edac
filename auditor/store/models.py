"""SQLAlchemy 2 typed models. The schema exists only through the Alembic migrations.

Volume design: ``reading_block`` holds a meter's readings in blocks of 96 intervals, one row per
block with each canonical quantity as a packed array (:mod:`auditor.store.blocks`), keyed by
(meter_id, block_start) with no rowid on SQLite, so a meter-year of 15-minute data is 365 rows
clustered by meter and time; every query the audit makes is a primary-key range scan.
Superseded values move to ``reading_revision``, one row per interval (kept for audit, never read
by the audit).
"""
from __future__ import annotations

from datetime import datetime

from sqlalchemy import (
    BigInteger,
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    MetaData,
    SmallInteger,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship

NAMING = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}

# Bits of an interval's flags (reading_block.flags, reading_revision.flags)
FLAG_ESTIMATED = 1  # the file flagged the interval as estimated
FLAG_FILLED = 2  # the value was estimated by this program (--estimate-gaps)

QUANTITIES = ("kwh", "kvarh_lag", "kvarh_lead", "kwh_received")


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING)


class Site(Base):
    __tablename__ = "site"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str] = mapped_column(String(200), unique=True)
    timezone: Mapped[str] = mapped_column(String(64), default="UTC")
    nominal_voltage_v: Mapped[float | None] = mapped_column(Float)
    transformer_kva: Mapped[float | None] = mapped_column(Float)
    transformer_impedance_percent: Mapped[float | None] = mapped_column(Float)
    # correction settings (migration 0004): screening settings over the defaults (JSON), the
    # measured harmonic spectrum as read (JSON), the share of the load on six-pulse drives
    screening_settings: Mapped[str | None] = mapped_column(Text)
    harmonic_spectrum: Mapped[str | None] = mapped_column(Text)
    drive_share: Mapped[float | None] = mapped_column(Float)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    meters: Mapped[list[Meter]] = relationship(back_populates="site")


class Meter(Base):
    __tablename__ = "meter"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    site_id: Mapped[int] = mapped_column(ForeignKey("site.id"))
    external_id: Mapped[str] = mapped_column(String(200), unique=True)
    # CT x VT ratio applied when readings are read back (values are stored as the file gave them,
    # after the file profile's own multiplier) so a wrong multiplier can be corrected without
    # re-importing.
    multiplier: Mapped[float] = mapped_column(Float, default=1.0)
    interval_minutes: Mapped[int | None] = mapped_column(SmallInteger)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    # the plausible maximum average power of an interval, kW (None: the import's default bound)
    max_kw: Mapped[float | None] = mapped_column(Float)
    site: Mapped[Site] = relationship(back_populates="meters")
    channels: Mapped[list[Channel]] = relationship(back_populates="meter")


class Channel(Base):
    """A quantity a meter records (kwh, kvarh_lag, kvarh_lead, kwh_received) and its source unit."""

    __tablename__ = "channel"
    __table_args__ = (UniqueConstraint("meter_id", "quantity"),)
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    meter_id: Mapped[int] = mapped_column(ForeignKey("meter.id"))
    quantity: Mapped[str] = mapped_column(String(32))
    source_unit: Mapped[str] = mapped_column(String(16))
    first_batch_id: Mapped[int | None] = mapped_column(ForeignKey("import_batch.id"))
    meter: Mapped[Meter] = relationship(back_populates="channels")


class ImportBatch(Base):
    __tablename__ = "import_batch"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    file_name: Mapped[str] = mapped_column(String(500))
    sha256: Mapped[str] = mapped_column(String(64), index=True)
    format: Mapped[str] = mapped_column(String(32))
    rows_accepted: Mapped[int] = mapped_column(Integer, default=0)
    rows_rejected: Mapped[int] = mapped_column(Integer, default=0)
    rows_revised: Mapped[int] = mapped_column(Integer, default=0)
    started_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    finished_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True))
    # imported | unchanged | revised | older | rejected
    status: Mapped[str] = mapped_column(String(16))
    errors: Mapped[str | None] = mapped_column(Text)  # JSON list of {line, column, message}
    # the file's modification time (epoch seconds): a file clearly older than the one that wrote
    # a stored value does not revise it without --force (store/write.py)
    source_mtime: Mapped[float | None] = mapped_column(Float)


class ReadingBlock(Base):
    """A meter's readings of one block of 96 intervals (:mod:`auditor.store.blocks` has the
    layout of each column)."""

    __tablename__ = "reading_block"
    __table_args__ = {"sqlite_with_rowid": False}
    meter_id: Mapped[int] = mapped_column(ForeignKey("meter.id"), primary_key=True)
    block_start: Mapped[int] = mapped_column(BigInteger, primary_key=True)  # UTC epoch seconds
    kwh: Mapped[bytes | None] = mapped_column(LargeBinary)
    kvarh_lag: Mapped[bytes | None] = mapped_column(LargeBinary)
    kvarh_lead: Mapped[bytes | None] = mapped_column(LargeBinary)
    kwh_received: Mapped[bytes | None] = mapped_column(LargeBinary)
    flags: Mapped[bytes | None] = mapped_column(LargeBinary)
    batch_id: Mapped[int] = mapped_column(Integer)  # not a FK: keeps the bulk path lean
    batch_ids: Mapped[bytes | None] = mapped_column(LargeBinary)


class ReadingRevision(Base):
    """A value that a later import superseded; kept so every change can be traced."""

    __tablename__ = "reading_revision"
    __table_args__ = (Index("ix_reading_revision_meter_start", "meter_id", "start"),)
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    meter_id: Mapped[int] = mapped_column(ForeignKey("meter.id"))
    start: Mapped[int] = mapped_column(BigInteger)
    kwh: Mapped[float | None] = mapped_column(Float)
    kvarh_lag: Mapped[float | None] = mapped_column(Float)
    kvarh_lead: Mapped[float | None] = mapped_column(Float)
    kwh_received: Mapped[float | None] = mapped_column(Float)
    flags: Mapped[int] = mapped_column(SmallInteger, default=0)
    batch_id: Mapped[int] = mapped_column(Integer)
    superseded_by: Mapped[int] = mapped_column(ForeignKey("import_batch.id"))


class QualityFlag(Base):
    """A data-quality finding (VEE) on a meter's data, from a given import."""

    __tablename__ = "quality_flag"
    __table_args__ = (Index("ix_quality_flag_meter", "meter_id", "start"),)
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    meter_id: Mapped[int] = mapped_column(ForeignKey("meter.id"))
    batch_id: Mapped[int] = mapped_column(ForeignKey("import_batch.id"))
    # gap | spike | estimated | filled | zero_run
    kind: Mapped[str] = mapped_column(String(16))
    start: Mapped[int] = mapped_column(BigInteger)
    end: Mapped[int] = mapped_column(BigInteger)
    intervals: Mapped[int] = mapped_column(Integer, default=0)
    detail: Mapped[str | None] = mapped_column(Text)


class Scenario(Base):
    """A saved correction scenario: its inputs and the result it gave, for the dashboard and reports."""

    __tablename__ = "scenario"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str] = mapped_column(String(200), unique=True)
    meter_id: Mapped[int] = mapped_column(ForeignKey("meter.id"))
    tariff_name: Mapped[str] = mapped_column(String(200))
    tariff_source: Mapped[str] = mapped_column(Text)  # the tariff's TOML text as used
    params: Mapped[str] = mapped_column(Text)  # JSON of the inputs
    result: Mapped[str] = mapped_column(Text)  # JSON of the size result
    annual_savings: Mapped[float | None] = mapped_column(Float)
    npv: Mapped[float | None] = mapped_column(Float)
    simple_payback_years: Mapped[float | None] = mapped_column(Float)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    # the case document's cover (migration 0006); empty when not given
    client: Mapped[str | None] = mapped_column(String(200))
    project: Mapped[str | None] = mapped_column(String(200))
    author: Mapped[str | None] = mapped_column(String(200))


# --------------------------------------------------------------------------------------------
# Utility bills (reconciled against the interval data by auditor.bills)
# --------------------------------------------------------------------------------------------
from datetime import date  # noqa: E402  (kept beside the bill models that use them)

from sqlalchemy import Date  # noqa: E402


class BillFile(Base):
    """A bill file as imported: its name, digest and text, so every stored bill can be traced
    to the file (and line) it came from, and a second import of the same file changes nothing."""

    __tablename__ = "bill_file"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    file_name: Mapped[str] = mapped_column(String(500))
    sha256: Mapped[str] = mapped_column(String(64), index=True)
    format: Mapped[str] = mapped_column(String(200))  # bills_csv or bills_profile:<name>
    content: Mapped[str] = mapped_column(Text)  # the file's text as read
    bills_inserted: Mapped[int] = mapped_column(Integer, default=0)
    bills_updated: Mapped[int] = mapped_column(Integer, default=0)
    bills_unchanged: Mapped[int] = mapped_column(Integer, default=0)
    imported_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))


class Bill(Base):
    """One utility bill of one meter: its period (local dates, end exclusive) and the figures it
    shows (None where the bill does not show one). A later file with the same meter and period
    updates the row; ``source_file_id`` is None for a bill typed in by hand."""

    __tablename__ = "bill"
    __table_args__ = (UniqueConstraint("meter_id", "period_start", "period_end"),)
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    meter_id: Mapped[int] = mapped_column(ForeignKey("meter.id"))
    period_start: Mapped[date] = mapped_column(Date)
    period_end: Mapped[date] = mapped_column(Date)
    kwh: Mapped[float | None] = mapped_column(Float)
    kvarh: Mapped[float | None] = mapped_column(Float)
    peak_kw: Mapped[float | None] = mapped_column(Float)
    peak_kva: Mapped[float | None] = mapped_column(Float)
    pf: Mapped[float | None] = mapped_column(Float)
    reactive_charge: Mapped[float | None] = mapped_column(Float)
    total: Mapped[float | None] = mapped_column(Float)
    # the utility's account and invoice numbers as printed (text: they may hold letters,
    # dashes and leading zeros); None where the bill file or the entry did not give them
    account: Mapped[str | None] = mapped_column(String(64))
    invoice: Mapped[str | None] = mapped_column(String(64))
    source_file_id: Mapped[int | None] = mapped_column(ForeignKey("bill_file.id"))
    source_line: Mapped[int | None] = mapped_column(Integer)
    created_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    updated_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))


# --------------------------------------------------------------------------------------------
# Monitoring: each meter's own tariff, day summaries for the checks, alerts and their digests
# --------------------------------------------------------------------------------------------
from sqlalchemy import Boolean, LargeBinary  # noqa: E402  (kept beside the models that use them)


class MeterTariff(Base):
    """The tariff a meter is billed under, as validated when it was set: the TOML text is kept
    so that audits and checks never depend on a file that may have moved or changed since."""

    __tablename__ = "meter_tariff"
    meter_id: Mapped[int] = mapped_column(ForeignKey("meter.id", ondelete="CASCADE"), primary_key=True)
    name: Mapped[str] = mapped_column(String(200))  # the tariff's own name
    source_name: Mapped[str] = mapped_column(String(200))  # file stem (how the dashboard names it)
    source_path: Mapped[str | None] = mapped_column(Text)
    toml: Mapped[str] = mapped_column(Text)
    sha256: Mapped[str] = mapped_column(String(64))
    billing_day: Mapped[int | None] = mapped_column(SmallInteger)  # None: calendar months
    set_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))


class MonitorDay(Base):
    """One local day of one meter summarised for the checks (sums, peaks, the kvar-kW relation,
    light-load figures and 24 hourly sums; :mod:`auditor.monitoring.days`), so a nightly run
    reads one small row per meter and day instead of weeks of intervals. ``summary`` is one
    ``auditor.monitoring.days.PACKED_DTYPE`` record (the day and its figures as float64, the 72
    hourly sums as float32); values are in real units with ``multiplier`` applied (kept so a
    later change of it is noticed). Derived data: rebuilt at will."""

    __tablename__ = "monitor_day"
    __table_args__ = {"sqlite_with_rowid": False}
    meter_id: Mapped[int] = mapped_column(ForeignKey("meter.id", ondelete="CASCADE"), primary_key=True)
    day: Mapped[date] = mapped_column(Date, primary_key=True)
    multiplier: Mapped[float] = mapped_column(Float)
    intervals: Mapped[int] = mapped_column(Integer)
    expected: Mapped[int] = mapped_column(Integer)
    summary: Mapped[bytes] = mapped_column(LargeBinary)


class Alert(Base):
    """A finding of the checks: raised once per cause, updated while the cause lasts, resolved
    when it ends. ``state``: new, seen or resolved."""

    __tablename__ = "alert"
    __table_args__ = (Index("ix_alert_meter_kind", "meter_id", "kind", "state"),
                      Index("ix_alert_state", "state"))
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    meter_id: Mapped[int] = mapped_column(ForeignKey("meter.id", ondelete="CASCADE"))
    kind: Mapped[str] = mapped_column(String(32))
    cause: Mapped[str] = mapped_column(String(100), default="")  # e.g. the billing period
    since: Mapped[datetime | None] = mapped_column(DateTime(timezone=True))
    severity: Mapped[str] = mapped_column(String(16))
    money_per_month: Mapped[float | None] = mapped_column(Float)
    currency: Mapped[str | None] = mapped_column(String(8))
    message: Mapped[str] = mapped_column(Text)
    figures: Mapped[str] = mapped_column(Text)  # JSON
    state: Mapped[str] = mapped_column(String(16))
    raised_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    updated_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    as_of: Mapped[datetime] = mapped_column(DateTime(timezone=True))  # the moment last evaluated
    seen_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True))
    resolved_at: Mapped[datetime | None] = mapped_column(DateTime(timezone=True))
    notified: Mapped[bool] = mapped_column(Boolean, default=False)  # in a digest already
    resolved_notified: Mapped[bool] = mapped_column(Boolean, default=False)


class MonitorRun(Base):
    """One evaluation of the checks: when, as of which moment, what it changed."""

    __tablename__ = "monitor_run"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    as_of: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    started_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    seconds: Mapped[float] = mapped_column(Float)
    trigger: Mapped[str] = mapped_column(String(16))  # import, command, web
    meters: Mapped[int] = mapped_column(Integer)
    raised: Mapped[int] = mapped_column(Integer)
    updated: Mapped[int] = mapped_column(Integer)
    resolved: Mapped[int] = mapped_column(Integer)
    batch_watermark: Mapped[int] = mapped_column(Integer)  # last import batch the day summaries saw


class Notification(Base):
    """One digest sent (or not) on one channel."""

    __tablename__ = "notification"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    sent_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
    channel: Mapped[str] = mapped_column(String(16))  # email, webhook
    alerts: Mapped[int] = mapped_column(Integer)
    status: Mapped[str] = mapped_column(String(16))  # sent, failed
    error: Mapped[str | None] = mapped_column(Text)
# Per-meter data versions and portfolio summaries (kept so that hundreds of meters list fast)
# --------------------------------------------------------------------------------------------
class MeterData(Base):
    """What a meter's stored readings are: their span, their count, and the import batch that
    last changed them (the meter's *data version*). Written by the import in the same
    transaction as the readings (:func:`auditor.store.meter_data.record_write`), so listing
    meters and keeping portfolio summaries never scans ``reading_block``."""

    __tablename__ = "meter_data"
    meter_id: Mapped[int] = mapped_column(ForeignKey("meter.id"), primary_key=True)
    data_batch_id: Mapped[int] = mapped_column(Integer)
    first_start: Mapped[int] = mapped_column(BigInteger)  # UTC epoch seconds of the first interval
    last_start: Mapped[int] = mapped_column(BigInteger)  # and of the last one
    intervals: Mapped[int] = mapped_column(Integer)


class MeterSummary(Base):
    """One meter's audit summary under one tariff (the portfolio row and the batch table's
    figures, as JSON), valid while ``data_key`` matches the meter's data version, multiplier,
    interval and time zone; ``tariff_digest`` is the SHA-256 of the tariff's content."""

    __tablename__ = "meter_summary"
    meter_id: Mapped[int] = mapped_column(ForeignKey("meter.id"), primary_key=True)
    tariff_digest: Mapped[str] = mapped_column(String(64), primary_key=True)
    data_key: Mapped[str] = mapped_column(String(64))
    summary: Mapped[str] = mapped_column(Text)
    computed_at: Mapped[datetime] = mapped_column(DateTime(timezone=True))
