"""Typed SQLAlchemy 2 models. Alembic (service/migrations/) owns the schema built from these."""

from __future__ import annotations

import datetime as dt
from typing import Any

from sqlalchemy import (
    JSON,
    BigInteger,
    CheckConstraint,
    Date,
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    MetaData,
    String,
    Text,
    Time,
    TypeDecorator,
    UniqueConstraint,
    text,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column

from service.working_calendar import DEFAULT_TRIPS_PER_DAY, DEFAULT_WORKING_DAYS

NAMING_CONVENTION = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}

#: Token roles, least to most: a role may call every route of the roles before it.
ROLES = ("viewer", "dispatcher", "admin")
CODE_LENGTH = 40
NAME_LENGTH = 200
HOLIDAY_REGION_LENGTH = 40
NOTE_LENGTH = 500
DEFAULT_SHIFT_START = dt.time(6, 0)
WEATHER_REGION_LENGTH = 40
#: Default base temperature of heating degree days (°C; UK practice, docs/planning.md §11.6).
DEFAULT_BASE_TEMPERATURE = 15.5


def utcnow() -> dt.datetime:
    """The current time, timezone-aware, in UTC."""
    return dt.datetime.now(dt.UTC)


class UTCDateTime(TypeDecorator[dt.datetime]):
    """A timestamp stored in UTC and always read back timezone-aware (SQLite drops the zone)."""

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: dt.datetime | None, dialect: Any) -> dt.datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError("naive datetime given to a UTC column")
        return value.astimezone(dt.UTC)

    def process_result_value(self, value: dt.datetime | None, dialect: Any) -> dt.datetime | None:
        if value is None:
            return None
        return value.replace(tzinfo=dt.UTC) if value.tzinfo is None else value.astimezone(dt.UTC)


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING_CONVENTION)


class Truck(Base):
    __tablename__ = "trucks"
    __table_args__ = (
        CheckConstraint("dispatch_cost >= 0", name="dispatch_cost_nonnegative"),
        CheckConstraint("capacity > 0", name="capacity_positive"),
        CheckConstraint("max_stops IS NULL OR max_stops >= 1", name="max_stops_positive"),
        CheckConstraint("trips_per_day >= 1 AND trips_per_day <= 24", name="trips_per_day_range"),
        CheckConstraint("cost_per_km >= 0", name="cost_per_km_nonnegative"),
        CheckConstraint("shift_hours IS NULL OR (shift_hours > 0 AND shift_hours <= 24)", name="shift_hours_range"),
        CheckConstraint("average_speed_kmh IS NULL OR average_speed_kmh > 0", name="average_speed_kmh_range"),
        CheckConstraint("stop_minutes IS NULL OR stop_minutes >= 0", name="stop_minutes_range"),
        CheckConstraint("load_minutes IS NULL OR load_minutes >= 0", name="load_minutes_range"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    code: Mapped[str] = mapped_column(String(CODE_LENGTH), unique=True)
    name: Mapped[str] = mapped_column(String(NAME_LENGTH))
    dispatch_cost: Mapped[float] = mapped_column(Float)
    capacity: Mapped[float] = mapped_column(Float)
    max_stops: Mapped[int | None] = mapped_column(Integer)
    # The working calendar (service.working_calendar): ISO weekdays 1 = Monday … 7 = Sunday, trips
    # on one working day, ISO dates it does not work, and a `holidays` region whose public holidays
    # close it. Lists are JSON (the same on SQLite and PostgreSQL); the API validates them.
    working_days: Mapped[list[int]] = mapped_column(
        JSON, default=lambda: list(DEFAULT_WORKING_DAYS), server_default=text("'[1, 2, 3, 4, 5]'")
    )
    trips_per_day: Mapped[int] = mapped_column(Integer, default=DEFAULT_TRIPS_PER_DAY, server_default=text("1"))
    closed_dates: Mapped[list[str]] = mapped_column(JSON, default=list, server_default=text("'[]'"))
    holiday_region: Mapped[str | None] = mapped_column(String(HOLIDAY_REGION_LENGTH))
    #: Local time of day the truck's deliveries are made (projections deliver at this time).
    shift_start: Mapped[dt.time] = mapped_column(Time, default=DEFAULT_SHIFT_START, server_default=text("'06:00:00'"))
    # The fleet level (issue 16): the depot it starts and ends its trips at, its cost per km of
    # route, its compartments' capacities (one product per compartment; None: one undivided tank)
    # and the product codes it may carry (None: any). Lists are JSON; the API validates them.
    depot: Mapped[str | None] = mapped_column(ForeignKey("depots.code"))
    cost_per_km: Mapped[float] = mapped_column(Float, default=0.0, server_default=text("0"))
    compartments: Mapped[list[float] | None] = mapped_column(JSON)
    products: Mapped[list[str] | None] = mapped_column(JSON)
    # The truck's shift (issue 16; None: not limited): when set, a day's trips (driving at the
    # average speed, plus minutes per stop, plus loading minutes per trip) fit ``shift_hours``.
    shift_hours: Mapped[float | None] = mapped_column(Float)
    average_speed_kmh: Mapped[float | None] = mapped_column(Float)
    stop_minutes: Mapped[float | None] = mapped_column(Float)
    load_minutes: Mapped[float | None] = mapped_column(Float)
    active: Mapped[bool] = mapped_column(default=True)
    version: Mapped[int] = mapped_column(default=1)
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=utcnow)
    updated_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=utcnow)


class Site(Base):
    __tablename__ = "sites"
    __table_args__ = (
        CheckConstraint("demand_per_day > 0", name="demand_positive"),
        CheckConstraint("holding_cost >= 0", name="holding_cost_nonnegative"),
        CheckConstraint("stop_cost >= 0", name="stop_cost_nonnegative"),
        CheckConstraint("tank_capacity > 0", name="tank_capacity_positive"),
        CheckConstraint("safe_fill > 0 AND safe_fill <= 1", name="safe_fill_fraction"),
        CheckConstraint(
            "safety_stock >= 0 AND safety_stock < safe_fill * tank_capacity", name="safety_stock_below_safe_fill"
        ),
        CheckConstraint(
            "service_level IS NULL OR (service_level > 0 AND service_level < 1)", name="service_level_fraction"
        ),
        CheckConstraint("lead_time_days >= 0", name="lead_time_nonnegative"),
        CheckConstraint("base_temperature >= -50 AND base_temperature <= 50", name="base_temperature_range"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    code: Mapped[str] = mapped_column(String(CODE_LENGTH), unique=True)
    name: Mapped[str] = mapped_column(String(NAME_LENGTH))
    truck_id: Mapped[int] = mapped_column(ForeignKey("trucks.id"), index=True)
    demand_per_day: Mapped[float] = mapped_column(Float)
    holding_cost: Mapped[float] = mapped_column(Float)
    stop_cost: Mapped[float] = mapped_column(Float)
    tank_capacity: Mapped[float] = mapped_column(Float)
    safe_fill: Mapped[float] = mapped_column(Float, default=0.9)
    safety_stock: Mapped[float] = mapped_column(Float, default=0.0)
    active: Mapped[bool] = mapped_column(default=True)
    latitude: Mapped[float | None] = mapped_column(Float)
    longitude: Mapped[float | None] = mapped_column(Float)
    #: Cycle service level the suggested safety stock is sized for (None: not sized).
    service_level: Mapped[float | None] = mapped_column(Float)
    #: Days from deciding a delivery to making it (the L of z·σ·√(T + L)).
    lead_time_days: Mapped[float] = mapped_column(Float, default=1.0, server_default=text("1.0"))
    # Weather-driven demand (heating oil, propane): the region whose posted daily temperatures
    # (weather_days) give the site's heating degree days, and their base temperature (°C).
    weather_region: Mapped[str | None] = mapped_column(String(WEATHER_REGION_LENGTH))
    base_temperature: Mapped[float] = mapped_column(
        Float, default=DEFAULT_BASE_TEMPERATURE, server_default=text(str(DEFAULT_BASE_TEMPERATURE))
    )
    #: Code of the liquid the tank holds (the products list); None: not yet said.
    product: Mapped[str | None] = mapped_column(ForeignKey("products.code"))
    version: Mapped[int] = mapped_column(default=1)
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=utcnow)
    updated_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=utcnow)


class Depot(Base):
    """Where trucks load and start and end their trips (WGS 84 degrees).

    Watched by the change-stamp triggers: the fleet level's routes start and end here.
    """

    __tablename__ = "depots"
    __table_args__ = (
        CheckConstraint("latitude >= -90 AND latitude <= 90", name="latitude_range"),
        CheckConstraint("longitude >= -180 AND longitude <= 180", name="longitude_range"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    code: Mapped[str] = mapped_column(String(CODE_LENGTH), unique=True)
    name: Mapped[str] = mapped_column(String(NAME_LENGTH))
    latitude: Mapped[float] = mapped_column(Float)
    longitude: Mapped[float] = mapped_column(Float)
    version: Mapped[int] = mapped_column(default=1)
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=utcnow)
    updated_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=utcnow)


class Product(Base):
    """A liquid the service plans for, with the safe fill its tanks default to (fraction of the tank).

    Watched by the change-stamp triggers, like every table a plan reads.
    """

    __tablename__ = "products"
    __table_args__ = (CheckConstraint("safe_fill > 0 AND safe_fill <= 1", name="safe_fill_fraction"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    code: Mapped[str] = mapped_column(String(CODE_LENGTH), unique=True)
    name: Mapped[str] = mapped_column(String(NAME_LENGTH))
    safe_fill: Mapped[float] = mapped_column(Float)
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=utcnow)


class WeatherDay(Base):
    """The daily mean temperature (°C) of one weather region on one calendar day.

    Posted by an admin (``POST /api/v1/weather/{region}``; the service never fetches weather):
    ``observed`` days are history, ``forecast`` days give the expected degree days of the days to
    come. Watched by the change-stamp triggers (projections of weather sites read it).
    """

    __tablename__ = "weather_days"
    __table_args__ = (
        UniqueConstraint("region", "day", name="uq_weather_days_region_day"),
        CheckConstraint("source IN ('observed', 'forecast')", name="source_known"),
        CheckConstraint("mean_temperature >= -90 AND mean_temperature <= 60", name="mean_temperature_range"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    region: Mapped[str] = mapped_column(String(WEATHER_REGION_LENGTH))
    day: Mapped[dt.date] = mapped_column(Date)
    mean_temperature: Mapped[float] = mapped_column(Float)
    source: Mapped[str] = mapped_column(String(8))
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=utcnow)
    created_by: Mapped[str] = mapped_column(String(80))


class Token(Base):
    """An API token. Only the SHA-256 of the secret is stored; the secret is shown once."""

    __tablename__ = "tokens"
    __table_args__ = (CheckConstraint(f"role IN ({', '.join(map(repr, sorted(ROLES)))})", name="role_known"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(80), unique=True)
    role: Mapped[str] = mapped_column(String(16))
    secret_hash: Mapped[str] = mapped_column(String(64), unique=True)
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=utcnow)
    last_used_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime)
    revoked_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime)


class StatusSession(Base):
    """A person signed in to the status page (service.web.access).

    The session cookie carries a random id; only its SHA-256 is stored, as for tokens. Sign-out
    deletes the row, so a copy of the cookie stops working at once; a page load also refuses a
    session older than ``access.SESSION_HOURS`` or whose token was revoked.
    """

    __tablename__ = "status_sessions"

    id: Mapped[int] = mapped_column(primary_key=True)
    secret_hash: Mapped[str] = mapped_column(String(64), unique=True)
    token_id: Mapped[int] = mapped_column(ForeignKey("tokens.id"), index=True)
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=utcnow, index=True)


class Plan(Base):
    """A recorded schedule: inputs snapshot and result are written once and never changed."""

    __tablename__ = "plans"
    __table_args__ = (
        CheckConstraint("status IN ('proposed', 'active', 'superseded')", name="status_known"),
        # At most one active plan per truck, enforced by the database.
        Index(
            "uq_plans_one_active_per_truck",
            "truck_id",
            unique=True,
            sqlite_where=text("status = 'active'"),
            postgresql_where=text("status = 'active'"),
        ),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    truck_id: Mapped[int] = mapped_column(ForeignKey("trucks.id"), index=True)
    status: Mapped[str] = mapped_column(String(12), default="proposed")
    method: Mapped[str] = mapped_column(String(16))
    start_date: Mapped[dt.date] = mapped_column(Date)
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=utcnow)
    created_by: Mapped[str] = mapped_column(String(80))
    inputs: Mapped[dict[str, Any]] = mapped_column(JSON)
    inputs_digest: Mapped[str] = mapped_column(String(64))
    result: Mapped[dict[str, Any]] = mapped_column(JSON)


class NetworkPlanJob(Base):
    """A network plan (issue 16) computed in the background: request snapshot, state, result.

    ``queued`` → ``running`` (claimed by ``worker``, which writes ``progress`` and ``heartbeat_at``)
    → ``done`` (``result`` set) or ``failed`` (``error`` set). A running job whose heartbeat is older
    than the lease is failed by the next reader or worker. ``activated_at`` is set once, in the same
    transaction that applies the assignment and activates every truck's plan.
    """

    __tablename__ = "network_plan_jobs"
    __table_args__ = (
        CheckConstraint("status IN ('queued', 'running', 'done', 'failed')", name="status_known"),
        CheckConstraint("progress >= 0 AND progress <= 1", name="progress_fraction"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    status: Mapped[str] = mapped_column(String(12), default="queued", index=True)
    progress: Mapped[float] = mapped_column(Float, default=0.0)
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=utcnow)
    created_by: Mapped[str] = mapped_column(String(80))
    started_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime)
    heartbeat_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime)
    finished_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime)
    worker: Mapped[str | None] = mapped_column(String(120))
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    start_date: Mapped[dt.date] = mapped_column(Date)
    inputs: Mapped[dict[str, Any]] = mapped_column(JSON)
    inputs_digest: Mapped[str] = mapped_column(String(64))
    result: Mapped[dict[str, Any] | None] = mapped_column(JSON)
    error: Mapped[str | None] = mapped_column(Text)
    activated_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime)
    activated_by: Mapped[str | None] = mapped_column(String(80))


class PlanSite(Base):
    """Which sites a plan was computed from (keeps referenced sites from being deleted)."""

    __tablename__ = "plan_sites"

    plan_id: Mapped[int] = mapped_column(ForeignKey("plans.id"), primary_key=True)
    site_id: Mapped[int] = mapped_column(ForeignKey("sites.id"), primary_key=True, index=True)


class Reading(Base):
    """A tank level reading."""

    __tablename__ = "readings"
    __table_args__ = (
        CheckConstraint("level >= 0", name="level_nonnegative"),
        Index("ix_readings_site_measured", "site_id", "measured_at"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    site_id: Mapped[int] = mapped_column(ForeignKey("sites.id"))
    level: Mapped[float] = mapped_column(Float)
    measured_at: Mapped[dt.datetime] = mapped_column(UTCDateTime)
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=utcnow)
    created_by: Mapped[str] = mapped_column(String(80))


class Delivery(Base):
    """A delivery that was made (what happened, never recomputed)."""

    __tablename__ = "deliveries"
    __table_args__ = (
        CheckConstraint("quantity > 0", name="quantity_positive"),
        CheckConstraint("level_before IS NULL OR level_before >= 0", name="level_before_nonnegative"),
        CheckConstraint("level_after IS NULL OR level_after >= 0", name="level_after_nonnegative"),
        Index("ix_deliveries_site_delivered", "site_id", "delivered_at"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    site_id: Mapped[int] = mapped_column(ForeignKey("sites.id"))
    truck_id: Mapped[int | None] = mapped_column(ForeignKey("trucks.id"), index=True)
    quantity: Mapped[float] = mapped_column(Float)
    delivered_at: Mapped[dt.datetime] = mapped_column(UTCDateTime)
    level_before: Mapped[float | None] = mapped_column(Float)
    level_after: Mapped[float | None] = mapped_column(Float)
    note: Mapped[str | None] = mapped_column(String(NOTE_LENGTH))
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=utcnow)
    created_by: Mapped[str] = mapped_column(String(80))


class IdempotencyRecord(Base):
    """One ``Idempotency-Key`` of one token: the request fingerprint and, once done, the response."""

    __tablename__ = "idempotency_keys"
    __table_args__ = (
        UniqueConstraint("token_id", "idempotency_key", name="uq_idempotency_keys_token_key"),
        CheckConstraint("state IN ('in_progress', 'done')", name="state_known"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    token_id: Mapped[int] = mapped_column(ForeignKey("tokens.id"))
    idempotency_key: Mapped[str] = mapped_column(String(255))
    method: Mapped[str] = mapped_column(String(8))
    path: Mapped[str] = mapped_column(String(400))
    body_sha256: Mapped[str] = mapped_column(String(64))
    state: Mapped[str] = mapped_column(String(12), default="in_progress")
    claim: Mapped[str] = mapped_column(String(32))
    claimed_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=utcnow)
    response_status: Mapped[int | None] = mapped_column(Integer)
    response_body: Mapped[str | None] = mapped_column(Text)
    response_location: Mapped[str | None] = mapped_column(String(400))
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime, default=utcnow, index=True)


class RequestQuota(Base):
    """How many limited requests one token made in the current fixed window, per bucket.

    One row per token and bucket, rewritten in place by one upsert per limited request
    (service.persistence.quota, service.bounded); shared by every gunicorn worker and host.
    """

    __tablename__ = "request_quotas"
    __table_args__ = (CheckConstraint("hits >= 0", name="hits_nonnegative"),)

    token_id: Mapped[int] = mapped_column(ForeignKey("tokens.id"), primary_key=True)
    bucket: Mapped[str] = mapped_column(String(16), primary_key=True)
    #: Start of the window, in whole seconds since the Unix epoch (UTC).
    window_start: Mapped[int] = mapped_column(BigInteger)
    hits: Mapped[int] = mapped_column(Integer)


class ChangeStamp(Base):
    """One row whose ``stamp`` is a fresh random value after every commit that changed what a
    weekly-trips answer reads: any row of ``trucks``, ``sites``, ``readings``, ``deliveries``,
    ``plans`` or ``weather_days``.

    Written by triggers (migrations 0002 and 0006), so no code path can forget it; read as the trips cache's
    marker (:func:`service.persistence.plans.change_stamp`). A random stamp, not a counter, so that
    a value never comes back: not after a restore from backup, nor in a test database rebuilt under
    a running process. On PostgreSQL the triggers are deferred to commit, so a transaction takes the
    row's lock last and holds it only while it commits (no lock-order deadlocks with row locks on
    sites); they write the row once per transaction.
    """

    __tablename__ = "change_stamp"
    __table_args__ = (CheckConstraint("id = 1", name="single_row"),)

    id: Mapped[int] = mapped_column(primary_key=True, autoincrement=False)
    stamp: Mapped[str] = mapped_column(String(32))
