"""Sites: list, read, create, change (If-Match), delete; CSV import and export."""

from flask import Response, current_app, request, url_for
from flask.views import MethodView
from marshmallow import ValidationError

from service import sites_csv
from service.api import fleet_refs, usable_stock
from service.api import http_headers as hh
from service.api.blueprint import Blueprint, accepts_body
from service.api.etags import IF_MATCH_PARAMETER, not_modified, require_if_match, version_etag
from service.api.pagination import link_headers
from service.api.schemas.problem import ProblemSchema
from service.api.schemas.sites import (
    ImportArgsSchema,
    ImportResultSchema,
    SiteListSchema,
    SitePatchSchema,
    SiteQueryArgsSchema,
    SiteSchema,
    check_safety_stock,
)
from service.auth import allow
from service.errors import PROBLEM_JSON, Problem, flatten_messages
from service.persistence import pages
from service.persistence import repository as repo
from service.persistence.models import Site, Truck
from service.request_db import get_session

PREFIX = "/sites"
PROBLEM = {"schema": ProblemSchema, "content_type": PROBLEM_JSON}  # documented error bodies
blp = Blueprint("sites", __name__, description="Customer tanks and depots")


def site_or_404(code: str, *, for_update: bool = False) -> Site:
    """The site (``repo.NotFound`` answers 404, ``service.errors``)."""
    return repo.site_by_code(get_session(), code, for_update=for_update)


def truck_for(code: str, pointer: str = "#/truck") -> Truck:
    """The truck a site write names, locked for the write (``repo.trucks_for_site_writes``)."""
    try:
        return repo.truck_by_code(get_session(), code, for_share=True)
    except repo.NotFound as exc:
        raise Problem(422, str(exc), kind="validation", errors=[{"pointer": pointer, "detail": str(exc)}]) from exc


def truck_to_check(code: str, data: dict) -> Truck:
    """The truck a change of site ``code`` is checked against (the one it names, else the site's
    own), locked before the site is: the order plan creation locks them in, so no deadlock."""
    session = get_session()
    truck_id = repo.site_truck_id(session, code)
    if "truck" in data:
        return truck_for(data["truck"])
    return repo.trucks_for_site_writes(session, [truck_id])[truck_id]


def unit() -> str:
    return current_app.config["ULLAGE_SETTINGS"].quantity_unit


def etag(site: Site) -> str:
    return version_etag("site", site.code, site.version)


def dump(site: Site, truck_code: str) -> dict:
    data = {name: getattr(site, name) for name in (*repo.SITE_FIELDS, "code", "version", "created_at", "updated_at")}
    data["truck"] = truck_code
    return data


@blp.route("")
class Sites(MethodView):
    @allow("viewer")
    @blp.arguments(SiteQueryArgsSchema, location="query")
    @blp.response(200, SiteListSchema, headers=hh.PAGED)
    def get(self, args):
        """List sites (filter by truck; keyset pages by code)

        At most `limit` sites (1–200, default 50) ordered by code, all or those `truck` serves; while
        more remain, the `Link` header names the next page.
        """
        session = get_session()
        result = pages.sites_page(session, args["limit"], args.get("after"), args.get("truck"))
        codes = repo.truck_codes(session, (s.truck_id for s in result.rows))
        return {"items": [dump(s, codes[s.truck_id]) for s in result.rows]}, link_headers(result)

    @allow("admin")
    @blp.arguments(SiteSchema)
    @blp.response(201, SiteSchema, headers=hh.CREATED)
    @blp.alt_response(409, description="A site with this code exists", **PROBLEM)
    def post(self, data):
        """Create a site

        Admin only. The site's usable stock (`tank_capacity × safe_fill − safety_stock`, capped by its
        truck's capacity) must last at least one day of `demand_per_day` (422 otherwise). Without
        `safe_fill` the site gets its product's default safe fill (0.9 without a product). Answers 201
        with the site, its `Location` and its `ETag`.
        """
        session = get_session()
        truck = truck_for(data["truck"])
        if repo.code_taken(session, Site, data["code"]):
            raise Problem(409, f"A site with code {data['code']!r} already exists.", kind="conflict")
        sent = set(data.keys())
        fleet_refs.fill_safe_fill(data, fleet_refs.check_site(data))
        _check_safety_stock(data)
        usable_stock.check_site(data["code"], data, truck.code, truck.capacity, unit(), sent)
        site = repo.add_site(session, data, truck)
        session.commit()
        return dump(site, truck.code), {"Location": url_for("sites.SiteByCode", code=site.code), "ETag": etag(site)}


def _check_safety_stock(site: dict) -> None:
    """422 unless ``safety_stock < safe_fill × tank_capacity`` (the values as they would be stored)."""
    try:
        check_safety_stock(site)
    except ValidationError as exc:
        raise Problem(
            422,
            "safety_stock must be below safe_fill × tank_capacity.",
            kind="validation",
            errors=flatten_messages(exc.normalized_messages()),
        ) from exc


@blp.route("/<string:code>")
class SiteByCode(MethodView):
    @allow("viewer")
    @blp.response(200, SiteSchema, headers=hh.TAGGED)
    @blp.alt_response(304, description="Not modified: the If-None-Match tag is current", headers=hh.TAGGED)
    @blp.header_parameters(hh.IF_NONE_MATCH)
    def get(self, code):
        """Read a site (strong ETag)

        The `ETag` changes with every change of the site (its `version`); send it in If-Match to
        change or delete the site, or in If-None-Match to get 304 while nothing changed.
        """
        site = site_or_404(code)
        truck_code = repo.truck_codes(get_session(), [site.truck_id])[site.truck_id]
        return not_modified(etag(site)) or (dump(site, truck_code), {"ETag": etag(site)})

    @allow("admin")
    @blp.arguments(SitePatchSchema(partial=True))
    @blp.response(200, SiteSchema, headers=hh.TAGGED)
    @blp.alt_response(412, description="ETag does not match; the current one is sent", headers=hh.TAGGED, **PROBLEM)
    @blp.alt_response(428, description="If-Match missing", **PROBLEM)
    @blp.header_parameters(IF_MATCH_PARAMETER)
    def patch(self, data, code):
        """Change a site (needs If-Match; every change bumps version)

        Admin only. Send only the fields to change; `active: false` takes the site out of future plans.
        Changing `product` alone keeps the stored `safe_fill` (send both to change both).
        Answers with the new version and `ETag`.
        """
        session = get_session()
        truck = truck_to_check(code, data) if usable_stock.RULE_FIELDS & data.keys() else None
        site = site_or_404(code, for_update=True)
        require_if_match(etag(site))
        fleet_refs.check_site(data)
        merged = {name: getattr(site, name) for name in ("safe_fill", "tank_capacity", "safety_stock")} | data
        _check_safety_stock(merged)
        if truck is not None:
            merged = usable_stock.values(site) | data
            usable_stock.check_site(site.code, merged, truck.code, truck.capacity, unit(), data.keys())
            data = data | {"truck_id": truck.id}
        repo.apply_changes(site, data, (*repo.SITE_FIELDS, "truck_id"))
        session.commit()
        truck_code = repo.truck_codes(session, [site.truck_id])[site.truck_id]
        return dump(site, truck_code), {"ETag": etag(site)}

    @allow("admin")
    @blp.response(204)
    @blp.alt_response(409, description="Recorded plans reference the site", **PROBLEM)
    @blp.alt_response(412, description="ETag does not match", **PROBLEM)
    @blp.alt_response(428, description="If-Match missing", **PROBLEM)
    @blp.header_parameters(IF_MATCH_PARAMETER)
    def delete(self, code):
        """Delete a site that no recorded plan references (otherwise PATCH active=false)

        Admin only, with If-Match. The site's tank readings go with it. While recorded plans
        reference the site the answer is 409.
        """
        session = get_session()
        site = site_or_404(code, for_update=True)
        require_if_match(etag(site))
        if repo.site_is_planned(session, site):
            raise Problem(
                409,
                "Recorded plans reference this site, so it stays on file; PATCH it with "
                "active=false to take it out of future plans.",
                kind="conflict",
            )
        repo.delete_site(session, site)
        session.commit()


@blp.route("/import")
class SiteImport(MethodView):
    @allow("admin")
    @accepts_body("text/csv")
    @blp.arguments(ImportArgsSchema, location="query")
    @blp.response(200, ImportResultSchema)
    @blp.doc(
        requestBody={
            "required": True,
            "description": sites_csv.FORMAT,
            "content": {"text/csv": {"schema": {"type": "string"}, "example": sites_csv.EXAMPLE}},
        }
    )
    def post(self, args):
        """Create or update sites from CSV (all or nothing; ?dry_run=true checks only)

        Admin only. Rows are matched to stored sites by `code`. One bad cell answers 422 naming every
        bad cell as `#/rows/<row>/<column>` (rows as a spreadsheet numbers them: the header is row 1)
        and nothing is written. `dry_run=true` checks and counts without writing.
        """
        session = get_session()
        try:
            result = sites_csv.import_sites(
                session, request.get_data(cache=False), dry_run=args["dry_run"], service_unit=unit()
            )
        except sites_csv.TooManyRows as exc:
            raise Problem(413, exc.detail, kind="too-many-rows") from exc
        except sites_csv.CsvRefused as exc:
            raise Problem(422, exc.detail, kind="validation", errors=exc.errors) from exc
        if args["dry_run"]:
            session.rollback()
        else:
            session.commit()
        return result


@blp.route("/export")
class SiteExport(MethodView):
    @allow("viewer")
    @blp.response(
        200,
        {"type": "string", "description": sites_csv.FORMAT},
        content_type="text/csv",
        description="The sites as CSV, in the import format",
        example=sites_csv.EXAMPLE,
    )
    def get(self):
        """All sites as CSV (text cells that could be read as formulas are defused)

        Every site, ordered by code, in the service unit, with the columns of the import. A text cell
        that starts with `=`, `+`, `-`, `@`, tab or carriage return gets a leading `'`, which the import
        removes again, so an export imports back unchanged.
        """
        body = sites_csv.export_sites(get_session())
        return Response(body, mimetype="text/csv", headers={"Content-Disposition": 'attachment; filename="sites.csv"'})
