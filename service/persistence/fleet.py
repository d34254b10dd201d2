"""Small functions over a session for the fleet level's depots and products. They never commit."""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.persistence.models import Depot, Product, Site
from service.persistence.repository import NotFound, apply_changes, lock_for_update

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


def set_site_products(session: Session, products: Mapping[str, str]) -> int:
    """Set the product of each site named in ``products`` (site code → product code), bumping the
    version of each site that changes; returns how many changed. ``NotFound`` names the first
    unknown site or product."""
    sites = {site.code: site for site in session.scalars(select(Site).where(Site.code.in_(set(products))))}
    changed = 0
    for code, product in products.items():
        if code not in sites:
            raise NotFound(f"No site with code {code!r}.")
        product_by_code(session, product)
        changed += apply_changes(sites[code], {"product": product}, ("product",))
    session.flush()
    return changed


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
