"""Small functions over a session for trucks, sites and tokens. They never commit."""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

from sqlalchemy import bindparam, delete, exists, func, select
from sqlalchemy.orm import Session

from service.persistence.models import Delivery, Plan, PlanSite, Reading, Site, Token, Truck, utcnow
from service.planning.inputs import SITE_PARAMETERS

SITE_FIELDS = (
    "name",
    *SITE_PARAMETERS,
    "active",
    "latitude",
    "longitude",
    "service_level",
    "lead_time_days",
    "weather_region",
    "base_temperature",
    "product",
)
TRUCK_FIELDS = (
    "name",
    "dispatch_cost",
    "capacity",
    "max_stops",
    "working_days",
    "trips_per_day",
    "closed_dates",
    "holiday_region",
    "shift_start",
    "depot",
    "cost_per_km",
    "compartments",
    "products",
    "shift_hours",
    "average_speed_kmh",
    "stop_minutes",
    "load_minutes",
    "active",
)


class NotFound(LookupError):
    """No such row."""


def lock_for_update(session: Session, statement: Any) -> Any:
    """``SELECT … FOR UPDATE`` on PostgreSQL; SQLite writers are already serialised (BEGIN IMMEDIATE)."""
    return statement.with_for_update() if session.get_bind().dialect.name == "postgresql" else statement


def lock_for_share(session: Session, statement: Any) -> Any:
    """``SELECT … FOR SHARE`` on PostgreSQL (readers of the row may share it, a writer waits)."""
    return statement.with_for_update(read=True) if session.get_bind().dialect.name == "postgresql" else statement


_BY_CODE = {model: select(model).where(model.code == bindparam("code")) for model in (Truck, Site)}


def _by_code(
    session: Session, model: type[Truck] | type[Site], code: str, for_update: bool, for_share: bool = False
) -> Any:
    statement = _BY_CODE[model]
    if for_update:
        statement = lock_for_update(session, statement)
    elif for_share:
        statement = lock_for_share(session, statement)
    row = session.scalars(statement, {"code": code}).one_or_none()
    if row is None:
        raise NotFound(f"No {model.__tablename__[:-1]} with code {code!r}.")
    return row


def truck_by_code(session: Session, code: str, *, for_update: bool = False, for_share: bool = False) -> Truck:
    """The truck; ``for_share`` locks it as :func:`trucks_for_site_writes` does."""
    return _by_code(session, Truck, code, for_update, for_share)


def trucks_for_site_writes(session: Session, truck_ids: Iterable[int]) -> dict[int, Truck]:
    """The trucks whose capacity a site write is checked against, locked ``FOR SHARE`` on
    PostgreSQL until the write commits, so a concurrent truck change waits and then sees the sites
    (the one-day rule, ``service/api/usable_stock.py``).

    Take this before locking or writing any site row: plan creation locks the truck, then its
    sites, and the same order everywhere means no deadlock.
    """
    ids = sorted(set(truck_ids))
    if not ids:
        return {}
    statement = lock_for_share(session, select(Truck).where(Truck.id.in_(ids)).order_by(Truck.id))
    return {t.id: t for t in session.scalars(statement.execution_options(populate_existing=True))}


def site_truck_id(session: Session, code: str) -> int:
    """The id of the truck that serves site ``code`` (a plain read: no site row is loaded or locked)."""
    truck_id = session.scalar(select(Site.truck_id).where(Site.code == code))
    if truck_id is None:
        raise NotFound(f"No site with code {code!r}.")
    return truck_id


def site_by_code(session: Session, code: str, *, for_update: bool = False) -> Site:
    return _by_code(session, Site, code, for_update)


def truck_codes(session: Session, ids: Iterable[int]) -> dict[int, str]:
    ids = set(ids)
    if not ids:
        return {}
    return dict(session.execute(select(Truck.id, Truck.code).where(Truck.id.in_(ids))).all())


def apply_changes(row: Any, changes: Mapping[str, Any], allowed: Iterable[str]) -> bool:
    """Set the allowed fields that differ; bump ``version`` and ``updated_at`` when anything changed
    (a site, truck or depot: any row with those two columns)."""
    changed = False
    for name in allowed:
        if name in changes and getattr(row, name) != changes[name]:
            setattr(row, name, changes[name])
            changed = True
    if changed:
        row.version += 1
        row.updated_at = utcnow()
    return changed


def add_truck(session: Session, data: Mapping[str, Any]) -> Truck:
    truck = Truck(code=data["code"], **{k: data[k] for k in TRUCK_FIELDS if k in data})
    session.add(truck)
    session.flush()
    return truck


def add_site(session: Session, data: Mapping[str, Any], truck: Truck) -> Site:
    site = Site(code=data["code"], truck_id=truck.id, **{k: data[k] for k in SITE_FIELDS if k in data})
    session.add(site)
    session.flush()
    return site


def site_is_planned(session: Session, site: Site) -> bool:
    return bool(session.scalar(select(exists().where(PlanSite.site_id == site.id))))


def delete_site(session: Session, site: Site) -> None:
    """Delete a site no plan references, with its readings and deliveries (they describe only this tank)."""
    session.execute(delete(Reading).where(Reading.site_id == site.id))
    session.execute(delete(Delivery).where(Delivery.site_id == site.id))
    session.delete(site)
    session.flush()


def truck_is_referenced(session: Session, truck: Truck) -> bool:
    has_sites = session.scalar(select(exists().where(Site.truck_id == truck.id)))
    has_plans = session.scalar(select(exists().where(Plan.truck_id == truck.id)))
    has_deliveries = session.scalar(select(exists().where(Delivery.truck_id == truck.id)))
    return bool(has_sites or has_plans or has_deliveries)


def active_sites(session: Session, truck: Truck) -> list[Site]:
    """The truck's active sites in code order (the order plans are computed in)."""
    return list(
        session.scalars(select(Site).where(Site.truck_id == truck.id, Site.active.is_(True)).order_by(Site.code))
    )


def count_rows(session: Session, model: type) -> int:
    return int(session.scalar(select(func.count()).select_from(model)) or 0)


def add_token(session: Session, name: str, role: str, secret_hash: str) -> Token:
    token = Token(name=name, role=role, secret_hash=secret_hash)
    session.add(token)
    session.flush()
    return token


def revoke_token(session: Session, name: str) -> Token:
    token = session.scalars(select(Token).where(Token.name == name)).one_or_none()
    if token is None:
        raise NotFound(f"No token named {name!r}.")
    if token.revoked_at is None:
        token.revoked_at = utcnow()
    return token


def truck_by_id(session: Session, truck_id: int) -> Truck:
    """The truck with this id (a site's or plan's own truck: it exists, the foreign key says so)."""
    truck = session.get(Truck, truck_id)
    if truck is None:
        raise NotFound(f"No truck with id {truck_id}.")
    return truck


def active_trucks(session: Session) -> list[Truck]:
    """The active trucks in code order."""
    return list(session.scalars(select(Truck).where(Truck.active.is_(True)).order_by(Truck.code)))


def delete_truck(session: Session, truck: Truck) -> None:
    """Delete a truck nothing references (:func:`truck_is_referenced`)."""
    session.delete(truck)
    session.flush()


def code_taken(session: Session, model: type[Truck] | type[Site], code: str) -> bool:
    """Whether a truck (or site) with this code exists."""
    return session.scalar(select(model.id).where(model.code == code)) is not None


def trucks_by_code(session: Session) -> dict[str, Truck]:
    """Every truck, by code."""
    return {t.code: t for t in session.scalars(select(Truck))}


def sites_by_code(session: Session, codes: Iterable[str]) -> dict[str, Site]:
    """The stored sites among ``codes``, by code."""
    return {s.code: s for s in session.scalars(select(Site).where(Site.code.in_(set(codes))))}


def sites_with_truck_codes(session: Session) -> list[tuple[Site, str]]:
    """Every site in code order, with its truck's code."""
    codes = dict(session.execute(select(Truck.id, Truck.code)).all())
    return [(site, codes[site.truck_id]) for site in session.scalars(select(Site).order_by(Site.code))]
