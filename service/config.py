"""Settings from the environment, then from an override mapping.

Twelve-factor style: everything that varies between deployments is an environment variable. The
variable names are listed in README.md (configuration table). Nothing here connects anywhere.

This is the one place the service reads its environment: the app, the CLI and the gunicorn
configuration (``service/gunicorn_conf.py``) all take their values from :func:`load_settings`
(``tests/integration/test_config_and_factory.py`` checks that no other module of ``service`` reads
it). Two variables are read by others, on purpose (DEVELOPERS.md, "Configuration"):
``PROMETHEUS_MULTIPROC_DIR``, which gunicorn_conf *sets* from ``ULLAGE_METRICS_DIR`` for
prometheus_client (the library reads it when imported), and ``ULLAGE_SKIP_MIGRATIONS``, which only
the Docker entrypoint (a shell script) reads.
"""

from __future__ import annotations

import os
import re
import secrets
import zoneinfo
from collections.abc import Mapping
from dataclasses import dataclass, fields, replace
from pathlib import Path
from typing import Any

#: ISO 4217 alphabetic codes we accept: three capital letters (the full register is not bundled;
#: a code of the right shape is accepted, anything else fails at start-up).
_CURRENCY = re.compile(r"^[A-Z]{3}$")
_UNIT = re.compile(r"^[A-Za-z0-9³]{1,8}$")

#: A revoked token must be refused in every worker within this time (docs/reliability.md, "Access").
MAX_TOKEN_CACHE_SECONDS = 5
#: Ceilings of the bounded-work settings (an hour of planning; the calculation schema's site limit).
MAX_PLAN_SECONDS = 3600
MAX_PLAN_SITES = 100_000

SECURE_COOKIES = ("auto", "always", "never")
MAX_TRUSTED_PROXIES = 5

#: Environment variable → settings field.
ENVIRONMENT = {
    "DATABASE_URL": "database_url",
    "ULLAGE_QUANTITY_UNIT": "quantity_unit",
    "ULLAGE_CURRENCY": "currency",
    "ULLAGE_TIMEZONE": "timezone",
    "ULLAGE_SECRET_KEY": "secret_key",
    "ULLAGE_MAX_BODY_BYTES": "max_body_bytes",
    "ULLAGE_MAX_CALCULATION_BYTES": "max_calculation_bytes",
    "ULLAGE_READING_STALE_DAYS": "reading_stale_days",
    "ULLAGE_TOKEN_CACHE_SECONDS": "token_cache_seconds",
    "ULLAGE_PLAN_SECONDS": "plan_seconds",
    "ULLAGE_PLAN_GRACE_SECONDS": "plan_grace_seconds",
    "ULLAGE_PLAN_PROCESSES": "plan_processes",
    "ULLAGE_PLAN_QUEUE": "plan_queue",
    "ULLAGE_MAX_PLAN_SITES": "max_plan_sites",
    "ULLAGE_NETWORK_PLAN_SECONDS": "network_plan_seconds",
    "ULLAGE_NETWORK_MAX_SITES": "network_max_sites",
    "ULLAGE_NETWORK_WORKERS": "network_workers",
    "ULLAGE_NETWORK_LEASE_SECONDS": "network_lease_seconds",
    "ULLAGE_NETWORK_POLL_SECONDS": "network_poll_seconds",
    "ULLAGE_MAX_TRIPS_DAYS": "max_trips_days",
    "ULLAGE_LONG_TRIPS_DAYS": "long_trips_days",
    "ULLAGE_PLANNING_PER_MINUTE": "planning_per_minute",
    "ULLAGE_HEAVY_READS_PER_MINUTE": "heavy_reads_per_minute",
    "ULLAGE_SECURE_COOKIES": "secure_cookies",
    "ULLAGE_TRUSTED_PROXIES": "trusted_proxies",
    "LOG_LEVEL": "log_level",
    # Serving (``ullage serve`` and service/gunicorn_conf.py); WEB_CONCURRENCY is the name gunicorn
    # and most platforms use for the number of worker processes.
    "WEB_CONCURRENCY": "workers",
    "ULLAGE_THREADS": "threads",
    "ULLAGE_REUSE_PORT": "reuse_port",
    "ULLAGE_HOST": "host",
    "ULLAGE_PORT": "port",
    "ULLAGE_METRICS_DIR": "metrics_dir",
}


def default_database_url() -> str:
    """A SQLite file under ``./var/`` of the working directory."""
    return f"sqlite:///{Path('var') / 'ullage.db'}"


def normalise_database_url(url: str) -> str:
    """Map the Heroku-style ``postgres://`` and bare ``postgresql://`` to psycopg 3.

    SQLAlchemy removed the ``postgres`` alias in 1.4 (sqlalchemy#6105).
    """
    for prefix in ("postgres://", "postgresql://"):
        if url.startswith(prefix):
            return "postgresql+psycopg://" + url[len(prefix) :]
    return url


@dataclass(frozen=True)
class Settings:
    """The service's configuration; one immutable object per app."""

    database_url: str
    quantity_unit: str = "L"
    currency: str = "EUR"
    timezone: str = "UTC"
    secret_key: str = ""
    max_body_bytes: int = 1 << 20
    max_calculation_bytes: int = 32 << 20
    reading_stale_days: int = 7
    token_cache_seconds: int = 2
    #: Bounded work (service.bounded): the planning time budget, the hard limit's grace, the
    #: low-priority processes per gunicorn worker and the requests that may wait for one.
    plan_seconds: float = 10.0
    plan_grace_seconds: float = 5.0
    plan_processes: int = 1
    plan_queue: int = 2
    #: Largest network one planning call may take (sites of a calculation or of a truck's plan).
    max_plan_sites: int = 1000
    #: Network plans (issue 16, service.network_worker): the default and largest time budget of one
    #: job, the most sites one job takes, the job threads each serving process runs (0: none, jobs
    #: then run only in `ullage worker`), how long a running job may go without a heartbeat before
    #: it is failed, and how often an idle worker looks for a queued job.
    network_plan_seconds: float = 280.0
    network_max_sites: int = 20_000
    network_workers: int = 1
    network_lease_seconds: float = 60.0
    network_poll_seconds: float = 2.0
    #: Longest trips window; windows longer than ``long_trips_days`` are heavy reads.
    max_trips_days: int = 92
    long_trips_days: int = 35
    #: Per-token limits per minute (0: none); admins are exempt.
    planning_per_minute: int = 20
    heavy_reads_per_minute: int = 30
    #: ``Secure`` on the status page's cookie: ``auto`` (when the request came over HTTPS),
    #: ``always`` or ``never``.
    secure_cookies: str = "auto"
    #: Reverse proxies in front of the service whose ``X-Forwarded-Proto``/``-For`` are believed
    #: (werkzeug's ProxyFix); 0 believes none.
    trusted_proxies: int = 0
    log_level: str = "INFO"
    #: gunicorn: worker processes, threads per worker, a listening socket per worker
    #: (:func:`listener_per_worker`), and where ``ullage serve`` listens.
    workers: int = 2
    threads: int = 4
    reuse_port: bool = False
    host: str = "127.0.0.1"
    port: int = 8000
    #: Under gunicorn, the directory where every worker keeps its metrics, so that a scrape of
    #: /metrics sums them all (service/metrics.py); emptied when gunicorn starts. One per server.
    metrics_dir: str = str(Path("var") / "prometheus")
    testing: bool = False

    def validate(self) -> Settings:
        """Fail fast on a value the service cannot work with."""
        if not _CURRENCY.match(self.currency):
            raise ValueError(f"ULLAGE_CURRENCY must be an ISO 4217 code such as EUR, got {self.currency!r}")
        if not _UNIT.match(self.quantity_unit):
            raise ValueError(
                f"ULLAGE_QUANTITY_UNIT must be a short label such as L, gal or m3, got {self.quantity_unit!r}"
            )
        try:
            zoneinfo.ZoneInfo(self.timezone)
        except (zoneinfo.ZoneInfoNotFoundError, ValueError) as exc:
            raise ValueError(f"ULLAGE_TIMEZONE must be an IANA time zone, got {self.timezone!r}") from exc
        for name in ("max_body_bytes", "max_calculation_bytes", "reading_stale_days"):
            if getattr(self, name) < 1:
                raise ValueError(f"{name} must be at least 1")
        for name in ("plan_processes", "max_plan_sites", "max_trips_days", "long_trips_days"):
            if getattr(self, name) < 1:
                raise ValueError(f"{name} must be at least 1")
        for name in ("plan_queue", "planning_per_minute", "heavy_reads_per_minute"):
            if getattr(self, name) < 0:
                raise ValueError(f"{name} must be 0 or more")
        if not 0 < self.plan_seconds <= MAX_PLAN_SECONDS or not 0 < self.plan_grace_seconds <= MAX_PLAN_SECONDS:
            raise ValueError(
                f"ULLAGE_PLAN_SECONDS and ULLAGE_PLAN_GRACE_SECONDS must be above 0, at most {MAX_PLAN_SECONDS}"
            )
        if not 0 < self.network_plan_seconds <= MAX_PLAN_SECONDS:
            raise ValueError(f"ULLAGE_NETWORK_PLAN_SECONDS must be above 0, at most {MAX_PLAN_SECONDS}")
        if not 1 <= self.network_max_sites <= MAX_PLAN_SITES:
            raise ValueError(f"ULLAGE_NETWORK_MAX_SITES must be 1 to {MAX_PLAN_SITES}")
        if self.network_workers < 0:
            raise ValueError("ULLAGE_NETWORK_WORKERS must be 0 or more")
        if not 15 <= self.network_lease_seconds <= MAX_PLAN_SECONDS or not 0 < self.network_poll_seconds <= 60:
            raise ValueError(
                "ULLAGE_NETWORK_LEASE_SECONDS must be 15 to 3600 (three heartbeats of 5 s) and "
                "ULLAGE_NETWORK_POLL_SECONDS above 0, at most 60"
            )
        if self.max_plan_sites > MAX_PLAN_SITES:
            raise ValueError(f"ULLAGE_MAX_PLAN_SITES must be at most {MAX_PLAN_SITES} (the request schema's own limit)")
        if self.secure_cookies not in SECURE_COOKIES:
            raise ValueError(
                f"ULLAGE_SECURE_COOKIES must be one of {', '.join(SECURE_COOKIES)}, got {self.secure_cookies!r}"
            )
        if not 0 <= self.trusted_proxies <= MAX_TRUSTED_PROXIES:
            raise ValueError(f"ULLAGE_TRUSTED_PROXIES must be 0 to {MAX_TRUSTED_PROXIES}")
        for name, variable in (("workers", "WEB_CONCURRENCY"), ("threads", "ULLAGE_THREADS")):
            if getattr(self, name) < 1:
                raise ValueError(f"{variable} must be at least 1")
        if not 1 <= self.port <= 65535:
            raise ValueError(f"ULLAGE_PORT must be a TCP port (1 to 65535), got {self.port}")
        if not self.metrics_dir.strip():
            raise ValueError("ULLAGE_METRICS_DIR must name a directory")
        if not 0 <= self.token_cache_seconds <= MAX_TOKEN_CACHE_SECONDS:
            raise ValueError(f"ULLAGE_TOKEN_CACHE_SECONDS must be 0 to {MAX_TOKEN_CACHE_SECONDS}")
        return self


def listener_per_worker(setting: str | None) -> bool:
    """Whether each worker listens on its own ``SO_REUSEPORT`` socket (gunicorn's ``reuse_port``).

    ``ULLAGE_REUSE_PORT=1`` turns it on; unset or ``0`` keeps gunicorn's one shared socket, which
    the master holds for the service's whole life. The trade-off, as ``benchmarks/load.py`` printed
    it (docs/reliability.md):

    * shared socket: whichever worker wakes first accepts a burst of connections and keep-alive
      pins them there; with 32 connections, some slices ran with all 32 on one of two workers and
      weekly trips at 380–400 req/s against 610–700 in the other slices;
    * a socket per worker: the kernel spreads new connections over the workers by a hash of their
      addresses, but a socket lives and dies with its worker. While a worker restarts (recycled
      after ``max_requests``, or crashed) connections queued on its socket are reset, and while
      every worker restarts at once nothing listens: recycling every 1 500 requests gave thousands
      of connection errors in a run where the shared socket gave none.

    So the safe one is the default, and a socket per worker is for many long-lived connections
    where throughput matters more than a rare refused connection that a client retries.
    """
    if setting in (None, "", "0"):
        return False
    if setting == "1":
        return True
    raise ValueError(f"ULLAGE_REUSE_PORT must be 1, 0 or unset, not {setting!r}")


def _coerce(name: str, value: Any) -> Any:
    if name == "reuse_port" and isinstance(value, str):
        return listener_per_worker(value)
    kind = {f.name: f.type for f in fields(Settings)}[name]
    if kind == "int" and isinstance(value, str):
        return int(value)
    if kind == "float" and isinstance(value, str):
        return float(value)
    if kind == "bool" and isinstance(value, str):
        return value.strip().lower() in {"1", "true", "yes", "on"}
    return value


def load_settings(
    overrides: Mapping[str, Any] | None = None,
    environ: Mapping[str, str] | None = None,
    *,
    ephemeral_secret: bool = True,
) -> Settings:
    """Build the settings: defaults, then the environment, then ``overrides``.

    ``overrides`` may use either the environment names (``DATABASE_URL``) or the field names
    (``database_url``); ``TESTING`` maps to ``testing``. Without ``ULLAGE_SECRET_KEY`` a random
    per-process key is made, unless ``ephemeral_secret`` is false (``secret_key`` then stays empty,
    for ``ullage serve`` to hand every worker the same key).
    """
    environ = os.environ if environ is None else environ
    values: dict[str, Any] = {"database_url": default_database_url()}
    for env_name, field_name in ENVIRONMENT.items():
        if environ.get(env_name):
            values[field_name] = _coerce(field_name, environ[env_name])
    known = {f.name for f in fields(Settings)}
    for key, value in (overrides or {}).items():
        field_name = ENVIRONMENT.get(key, key.lower())
        if field_name in known:
            values[field_name] = _coerce(field_name, value)
    settings = Settings(**values)
    settings = replace(settings, database_url=normalise_database_url(settings.database_url))
    if not settings.secret_key and ephemeral_secret:
        # A per-process key: sessions do not survive a restart and are not shared between
        # workers. Production sets ULLAGE_SECRET_KEY (README).
        settings = replace(settings, secret_key=secrets.token_urlsafe(32))
    return settings.validate()
