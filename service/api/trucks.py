"""Trucks: list, read, create, change (If-Match), delete."""

from flask import current_app, url_for
from flask.views import MethodView

from service.api import fleet_refs, usable_stock
from service.api import http_headers as hh
from service.api.blueprint import Blueprint
from service.api.etags import IF_MATCH_PARAMETER, not_modified, require_if_match, version_etag
from service.api.pagination import page
from service.api.schemas.problem import ProblemSchema
from service.api.schemas.trucks import TruckListSchema, TruckPatchSchema, TruckQueryArgsSchema, TruckSchema
from service.auth import allow
from service.errors import PROBLEM_JSON, Problem
from service.persistence import pages
from service.persistence import repository as repo
from service.persistence.models import Truck
from service.request_db import get_session

PREFIX = "/trucks"
PROBLEM = {"schema": ProblemSchema, "content_type": PROBLEM_JSON}  # documented error bodies
blp = Blueprint("trucks", __name__, description="Trucks: dispatch cost, capacity and stop limit")


def truck_or_404(code: str, *, for_update: bool = False) -> Truck:
    """The truck (``repo.NotFound`` answers 404, ``service.errors``)."""
    return repo.truck_by_code(get_session(), code, for_update=for_update)


def etag(truck: Truck) -> str:
    return version_etag("truck", truck.code, truck.version)


@blp.route("")
class Trucks(MethodView):
    @allow("viewer")
    @blp.arguments(TruckQueryArgsSchema, location="query")
    @blp.response(200, TruckListSchema, headers=hh.PAGED)
    def get(self, args):
        """List trucks (keyset pages by code)

        At most `limit` trucks (1–200, default 50) ordered by code; while more remain, the `Link`
        header names the next page (`after` is the last code of this one).
        """
        return page(pages.trucks_page(get_session(), args["limit"], args.get("after")))

    @allow("admin")
    @blp.arguments(TruckSchema)
    @blp.response(201, TruckSchema, headers=hh.CREATED)
    @blp.alt_response(409, description="A truck with this code exists", **PROBLEM)
    def post(self, data):
        """Create a truck

        Admin only. `depot` and `products` name stored depots and products, and `compartments`
        sum to `capacity` (422 otherwise). `shift_hours` needs `average_speed_kmh` (422 naming
        it otherwise); without `shift_hours` a truck's day is not limited. Answers 201 with the truck, its `Location` and its `ETag`.
        """
        session = get_session()
        if repo.code_taken(session, Truck, data["code"]):
            raise Problem(409, f"A truck with code {data['code']!r} already exists.", kind="conflict")
        fleet_refs.check_truck(data, data["capacity"], data["compartments"])
        fleet_refs.check_shift(data["shift_hours"], data["average_speed_kmh"])
        truck = repo.add_truck(session, data)
        session.commit()
        return truck, {"Location": url_for("trucks.TruckByCode", code=truck.code), "ETag": etag(truck)}


@blp.route("/<string:code>")
class TruckByCode(MethodView):
    @allow("viewer")
    @blp.response(200, TruckSchema, headers=hh.TAGGED)
    @blp.alt_response(304, description="Not modified: the If-None-Match tag is current", headers=hh.TAGGED)
    @blp.header_parameters(hh.IF_NONE_MATCH)
    def get(self, code):
        """Read a truck (strong ETag)

        The `ETag` changes with every change of the truck (its `version`); send it in If-Match to
        change or delete the truck, or in If-None-Match to get 304 while nothing changed.
        """
        truck = truck_or_404(code)
        return not_modified(etag(truck)) or (truck, {"ETag": etag(truck)})

    @allow("admin")
    @blp.arguments(TruckPatchSchema(partial=True))
    @blp.response(200, TruckSchema, headers=hh.TAGGED)
    @blp.alt_response(412, description="ETag does not match; the current one is sent", headers=hh.TAGGED, **PROBLEM)
    @blp.alt_response(428, description="If-Match missing", **PROBLEM)
    @blp.header_parameters(IF_MATCH_PARAMETER)
    def patch(self, data, code):
        """Change a truck (needs If-Match)

        Admin only. Send only the fields to change. `depot` and `products` name stored depots and
        products, and the compartments sum to the capacity (422 otherwise). A capacity cut below one day's demand of an
        active site of the truck is refused with 422. Answers with the new version and `ETag`.
        """
        session = get_session()
        truck = truck_or_404(code, for_update=True)
        require_if_match(etag(truck))
        fleet_refs.check_truck(data, data.get("capacity", truck.capacity), data.get("compartments", truck.compartments))
        fleet_refs.check_shift(
            data.get("shift_hours", truck.shift_hours), data.get("average_speed_kmh", truck.average_speed_kmh)
        )
        if data.get("capacity", truck.capacity) < truck.capacity:
            unit = current_app.config["ULLAGE_SETTINGS"].quantity_unit
            sites = repo.active_sites(session, truck)
            usable_stock.check_truck_capacity(truck.code, truck.capacity, data["capacity"], sites, unit)
        repo.apply_changes(truck, data, repo.TRUCK_FIELDS)
        session.commit()
        return truck, {"ETag": etag(truck)}

    @allow("admin")
    @blp.response(204)
    @blp.alt_response(409, description="Sites or plans still reference the truck", **PROBLEM)
    @blp.alt_response(412, description="ETag does not match", **PROBLEM)
    @blp.alt_response(428, description="If-Match missing", **PROBLEM)
    @blp.header_parameters(IF_MATCH_PARAMETER)
    def delete(self, code):
        """Delete a truck that no site or plan references

        Admin only, with If-Match. While sites or recorded plans reference the truck the answer is
        409: move its sites, or PATCH it with `active: false`.
        """
        session = get_session()
        truck = truck_or_404(code, for_update=True)
        require_if_match(etag(truck))
        if repo.truck_is_referenced(session, truck):
            raise Problem(
                409,
                "Sites, recorded plans or deliveries reference this truck; move its sites first, or PATCH it with active=false.",
                kind="conflict",
            )
        repo.delete_truck(session, truck)
        session.commit()
