"""Depots: list, read, create, change (If-Match). Trucks start and end their trips at their depot."""

from flask import url_for
from flask.views import MethodView

from service.api import http_headers as hh
from service.api.blueprint import Blueprint
from service.api.etags import IF_MATCH_PARAMETER, not_modified, require_if_match, version_etag
from service.api.pagination import page
from service.api.schemas.fleet import DepotListSchema, DepotPatchSchema, DepotSchema, FleetQueryArgsSchema
from service.api.schemas.problem import ProblemSchema
from service.auth import allow
from service.errors import PROBLEM_JSON, Problem
from service.persistence import fleet, pages
from service.persistence import repository as repo
from service.persistence.models import Depot
from service.request_db import get_session

PREFIX = "/depots"
PROBLEM = {"schema": ProblemSchema, "content_type": PROBLEM_JSON}  # documented error bodies
blp = Blueprint("depots", __name__, description="Depots: where trucks load and start and end their trips")


def etag(depot: Depot) -> str:
    return version_etag("depot", depot.code, depot.version)


@blp.route("")
class Depots(MethodView):
    @allow("viewer")
    @blp.arguments(FleetQueryArgsSchema, location="query")
    @blp.response(200, DepotListSchema, headers=hh.PAGED)
    def get(self, args):
        """List depots (keyset pages by code)

        At most `limit` depots (1–200, default 50) ordered by code; while more remain, the `Link`
        header names the next page (`after` is the last code of this one).
        """
        return page(pages.depots_page(get_session(), args["limit"], args.get("after")))

    @allow("admin")
    @blp.arguments(DepotSchema)
    @blp.response(201, DepotSchema, headers=hh.CREATED)
    @blp.alt_response(409, description="A depot with this code exists", **PROBLEM)
    def post(self, data):
        """Create a depot

        Admin only. `latitude` and `longitude` are WGS 84 degrees. Answers 201 with the depot, its
        `Location` and its `ETag`.
        """
        session = get_session()
        if fleet.code_taken(session, Depot, data["code"]):
            raise Problem(409, f"A depot with code {data['code']!r} already exists.", kind="conflict")
        depot = fleet.add_depot(session, data)
        session.commit()
        return depot, {"Location": url_for("depots.DepotByCode", code=depot.code), "ETag": etag(depot)}


@blp.route("/<string:code>")
class DepotByCode(MethodView):
    @allow("viewer")
    @blp.response(200, DepotSchema, headers=hh.TAGGED)
    @blp.alt_response(304, description="Not modified: the If-None-Match tag is current", headers=hh.TAGGED)
    @blp.header_parameters(hh.IF_NONE_MATCH)
    def get(self, code):
        """Read a depot (strong ETag)

        The `ETag` changes with every change of the depot (its `version`); send it in If-Match to
        change the depot, or in If-None-Match to get 304 while nothing changed.
        """
        depot = fleet.depot_by_code(get_session(), code)
        return not_modified(etag(depot)) or (depot, {"ETag": etag(depot)})

    @allow("admin")
    @blp.arguments(DepotPatchSchema(partial=True))
    @blp.response(200, DepotSchema, headers=hh.TAGGED)
    @blp.alt_response(412, description="ETag does not match; the current one is sent", headers=hh.TAGGED, **PROBLEM)
    @blp.alt_response(428, description="If-Match missing", **PROBLEM)
    @blp.header_parameters(IF_MATCH_PARAMETER)
    def patch(self, data, code):
        """Change a depot (needs If-Match)

        Admin only. Send only the fields to change (the code stays). Answers with the new version
        and `ETag`.
        """
        session = get_session()
        depot = fleet.depot_by_code(session, code, for_update=True)
        require_if_match(etag(depot))
        repo.apply_changes(depot, data, fleet.DEPOT_FIELDS)
        session.commit()
        return depot, {"ETag": etag(depot)}
