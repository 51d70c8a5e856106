"""The tables. JSON documents are stored as text so SQLite and PostgreSQL hold the same bytes."""

from datetime import date, datetime

from sqlalchemy import Column, Date, DateTime, Index, Text, UniqueConstraint
from sqlmodel import Field, SQLModel


def _utc_column(*, index: bool = False) -> Column:  # type: ignore[type-arg]
    return Column(DateTime(timezone=True), nullable=False, index=index)


class CatalogRow(SQLModel, table=True):
    __tablename__ = "catalog"

    id: str = Field(primary_key=True, max_length=40)
    name: str = Field(max_length=200)
    currency: str = Field(max_length=3)
    content_hash: str = Field(max_length=64, unique=True)
    content: str = Field(sa_column=Column(Text, nullable=False))
    created_at: datetime = Field(sa_column=_utc_column(index=True))
    # The lifecycle: "active" or "retired" (the only thing about a catalog that changes), and the
    # dates, copied from the content, on which a quote may use it (both inclusive; None: unbounded).
    status: str = Field(default="active", max_length=16, sa_column_kwargs={"server_default": "active"})
    effective_from: date | None = Field(default=None, sa_column=Column(Date, nullable=True))
    effective_until: date | None = Field(default=None, sa_column=Column(Date, nullable=True))


class DefaultCatalogRow(SQLModel, table=True):
    """The catalog a request that names none uses: one row at most (`slot` is always 1), set by an
    admin and never by an upload."""

    __tablename__ = "default_catalog"

    slot: int = Field(default=1, primary_key=True)
    catalog_id: str = Field(foreign_key="catalog.id", max_length=40)
    set_at: datetime = Field(sa_column=_utc_column())


class QuoteRow(SQLModel, table=True):
    __tablename__ = "quote"
    __table_args__ = (Index("ix_quote_created_id", "created_at", "id"),)

    id: str = Field(primary_key=True, max_length=40)
    created_at: datetime = Field(sa_column=_utc_column())
    team: str = Field(max_length=100, index=True)
    campaign_name: str = Field(max_length=200, index=True)
    catalog_id: str = Field(foreign_key="catalog.id", max_length=40, index=True)
    catalog_hash: str = Field(max_length=64)
    model_version: str = Field(max_length=80)
    request: str = Field(sa_column=Column(Text, nullable=False))
    response: str = Field(sa_column=Column(Text, nullable=False))


class IdempotencyRow(SQLModel, table=True):
    """One Idempotency-Key of one caller: claimed while the first request runs, then its answer."""

    __tablename__ = "idempotency_key"
    __table_args__ = (UniqueConstraint("caller", "key", name="uq_idempotency_caller_key"),)

    id: int | None = Field(default=None, primary_key=True)
    caller: str = Field(max_length=100)
    key: str = Field(max_length=255)
    body_hash: str = Field(max_length=64)
    state: str = Field(max_length=16)  # "in_flight" or "done"
    holder: str | None = Field(default=None, max_length=120)  # the process running it (`liveness.this_process`)
    status_code: int | None = None
    response: str | None = Field(default=None, sa_column=Column(Text, nullable=True))
    claimed_at: datetime = Field(sa_column=_utc_column())
    expires_at: datetime = Field(sa_column=_utc_column(index=True))


class SweepRow(SQLModel, table=True):
    """A sweep request and, once run, its summary. Rows are not stored: they are recomputed from
    the seeded request when asked for, identically."""

    __tablename__ = "sweep"

    id: str = Field(primary_key=True, max_length=40)
    created_at: datetime = Field(sa_column=_utc_column(index=True))
    catalog_id: str = Field(foreign_key="catalog.id", max_length=40)
    status: str = Field(max_length=16)  # queued, running, done, failed, cancelled
    scenarios_total: int
    scenarios_done: int = 0
    request: str = Field(sa_column=Column(Text, nullable=False))
    result: str | None = Field(default=None, sa_column=Column(Text, nullable=True))
    error: str | None = Field(default=None, sa_column=Column(Text, nullable=True))
    finished_at: datetime | None = Field(default=None, sa_column=Column(DateTime(timezone=True), nullable=True))
    heartbeat_at: datetime | None = Field(default=None, sa_column=Column(DateTime(timezone=True), nullable=True))
    runner: str | None = Field(default=None, max_length=120)  # the process running it (`liveness.this_process`)


class FleetPlanRow(SQLModel, table=True):
    """A fleet plan's request and answer, kept so its chart and report can be fetched later."""

    __tablename__ = "fleet_plan"

    id: str = Field(primary_key=True, max_length=40)
    created_at: datetime = Field(sa_column=_utc_column(index=True))
    catalog_id: str = Field(foreign_key="catalog.id", max_length=40)
    request: str = Field(sa_column=Column(Text, nullable=False))
    response: str = Field(sa_column=Column(Text, nullable=False))


class ApiKeyRow(SQLModel, table=True):
    """An API key, stored only as the sha256 of the key itself, with the role and team it acts for."""

    __tablename__ = "api_key"

    id: str = Field(primary_key=True, max_length=40)
    key_hash: str = Field(max_length=64, unique=True)
    prefix: str = Field(max_length=16, index=True)  # the key's first characters: public, to find it by
    role: str = Field(max_length=16)
    team: str = Field(max_length=100)
    created_at: datetime = Field(sa_column=_utc_column())
    revoked_at: datetime | None = Field(default=None, sa_column=Column(DateTime(timezone=True), nullable=True))


class StorageProbeRow(SQLModel, table=True):
    """One row per process, rewritten by /readyz after a write failed for want of space, with a filler
    the size of a large quote: the service is ready again once such a write commits."""

    __tablename__ = "storage_probe"

    holder: str = Field(primary_key=True, max_length=120)
    written_at: datetime = Field(sa_column=_utc_column())
    filler: str = Field(sa_column=Column(Text, nullable=False))
