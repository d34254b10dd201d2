"""Products: the liquids sites hold and trucks carry, each with its default safe fill."""

from flask import url_for
from flask.views import MethodView

from service.api import http_headers as hh
from service.api.blueprint import Blueprint
from service.api.pagination import page
from service.api.schemas.fleet import FleetQueryArgsSchema, ProductListSchema, ProductSchema
from service.api.schemas.problem import ProblemSchema
from service.auth import allow
from service.errors import PROBLEM_JSON, Problem
from service.persistence import fleet, pages
from service.persistence.models import Product
from service.request_db import get_session

PREFIX = "/products"
PROBLEM = {"schema": ProblemSchema, "content_type": PROBLEM_JSON}  # documented error bodies
blp = Blueprint("products", __name__, description="Products: the liquids planned for, with their default safe fill")


@blp.route("")
class Products(MethodView):
    @allow("viewer")
    @blp.arguments(FleetQueryArgsSchema, location="query")
    @blp.response(200, ProductListSchema, headers=hh.PAGED)
    def get(self, args):
        """List products (keyset pages by code)

        At most `limit` products (1–200, default 50) ordered by code; while more remain, the `Link`
        header names the next page (`after` is the last code of this one).
        """
        return page(pages.products_page(get_session(), args["limit"], args.get("after")))

    @allow("admin")
    @blp.arguments(ProductSchema)
    @blp.response(201, ProductSchema, headers={"Location": hh.LOCATION})
    @blp.alt_response(409, description="A product with this code exists", **PROBLEM)
    def post(self, data):
        """Create a product

        Admin only. `safe_fill` is the fraction of a tank of this product that may be filled; it
        is a default, and each site's own `safe_fill` is what plans use. Answers 201 with the
        product and its `Location`.
        """
        session = get_session()
        if fleet.code_taken(session, Product, data["code"]):
            raise Problem(409, f"A product with code {data['code']!r} already exists.", kind="conflict")
        product = fleet.add_product(session, data)
        session.commit()
        return product, {"Location": url_for("products.ProductByCode", code=product.code)}


@blp.route("/<string:code>")
class ProductByCode(MethodView):
    @allow("viewer")
    @blp.response(200, ProductSchema)
    def get(self, code):
        """Read a product

        The product's name and default safe fill.
        """
        return fleet.product_by_code(get_session(), code)
