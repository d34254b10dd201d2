"""Small functions over a session for the fleet level's depots and products. They never commit."""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.persistence.models import Depot, Product
from service.persistence.repository import NotFound, lock_for_update

DEPOT_FIELDS = ("name", "latitude", "longitude")
PRODUCT_FIELDS = ("name", "safe_fill")


def depot_by_code(session: Session, code: str, *, for_update: bool = False) -> Depot:
    """The depot (``NotFound`` if none has this code)."""
    statement = select(Depot).where(Depot.code == code)
    if for_update:
        statement = lock_for_update(session, statement)
    depot = session.scalars(statement).one_or_none()
    if depot is None:
        raise NotFound(f"No depot with code {code!r}.")
    return depot


def product_by_code(session: Session, code: str) -> Product:
    """The product (``NotFound`` if none has this code)."""
    product = session.scalars(select(Product).where(Product.code == code)).one_or_none()
    if product is None:
        raise NotFound(f"No product with code {code!r}.")
    return product


def product_safe_fills(session: Session) -> dict[str, float]:
    """Every product's default safe fill by code."""
    return {code: float(fill) for code, fill in session.execute(select(Product.code, Product.safe_fill))}



def code_taken(session: Session, model: type[Depot] | type[Product], code: str) -> bool:
    """Whether a depot (or product) with this code exists."""
    return session.scalar(select(model.id).where(model.code == code)) is not None


def unknown_products(session: Session, codes: Iterable[str]) -> list[str]:
    """The codes among ``codes`` that name no product, in the order given."""
    codes = list(codes)
    known = set(session.scalars(select(Product.code).where(Product.code.in_(set(codes)))))
    return [code for code in codes if code not in known]


def add_depot(session: Session, data: Mapping[str, Any]) -> Depot:
    depot = Depot(code=data["code"], **{k: data[k] for k in DEPOT_FIELDS})
    session.add(depot)
    session.flush()
    return depot


def add_product(session: Session, data: Mapping[str, Any]) -> Product:
    product = Product(code=data["code"], **{k: data[k] for k in PRODUCT_FIELDS})
    session.add(product)
    session.flush()
    return product


def all_depots(session: Session) -> list[Depot]:
    """Every depot, by code."""
    return list(session.scalars(select(Depot).order_by(Depot.code)))


def all_products(session: Session) -> list[Product]:
    """Every product, by code."""
    return list(session.scalars(select(Product).order_by(Product.code)))
