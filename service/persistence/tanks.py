"""Reads for the status page's morning views: the active trucks and every active site with its truck.

Small functions over a session; they never commit.
"""

from __future__ import annotations

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.persistence.models import Site, Truck


def active_trucks(session: Session) -> list[Truck]:
    """The active trucks in code order."""
    return list(session.scalars(select(Truck).where(Truck.active.is_(True)).order_by(Truck.code)))


def active_sites(session: Session) -> list[tuple[Site, Truck]]:
    """Every active site with its truck (active or not), in truck then site code order."""
    rows = session.execute(
        select(Site, Truck)
        .join(Truck, Site.truck_id == Truck.id)
        .where(Site.active.is_(True))
        .order_by(Truck.code, Site.code)
    )
    return [(site, truck) for site, truck in rows]
