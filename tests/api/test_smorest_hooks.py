"""The flask-smorest internals ``service/api`` builds on, checked in one place.

flask-smorest is 0.x and ``pyproject.toml`` bounds it below 0.48. ``service.api.Api`` overrides
the private ``Api._register_responses`` (so that every error response in the document is
``application/problem+json`` and the default error carries ``Retry-After``), and
``service.api.blueprint`` reads and extends the private ``_apidoc`` of a view and the
``_prepare_doc_cbks`` of a blueprint (request header parameters; the request guards' argument
locations). When an upgrade moves any of these, these tests name what moved.
"""

from __future__ import annotations

import inspect
from http import HTTPStatus
from importlib.metadata import version

from flask_smorest.spec import APISpecMixin

from service.api import Api
from service.api.blueprint import Blueprint, _list_valued_query, _locations
from service.auth import handler_for


def test_smorest_still_calls_the_hook_we_override():
    # 0.47.0's APISpecMixin._init_spec registers the default responses through this one method.
    assert "self._register_responses()" in inspect.getsource(APISpecMixin._init_spec)
    assert Api._register_responses is not APISpecMixin._register_responses


def test_the_override_is_what_the_document_says(client, auth):
    spec = client.get("/api/v1/openapi.json", headers=auth("viewer")).get_json()
    responses = spec["components"]["responses"]  # registered lazily: those some operation refers to
    errors = {name for name in responses if name == "DEFAULT_ERROR" or HTTPStatus[name] >= 400}
    assert "DEFAULT_ERROR" in errors and len(errors) > 1
    assert {name: set(responses[name]["content"]) for name in errors} == {
        name: {"application/problem+json"} for name in errors
    }
    assert "Retry-After" in responses["DEFAULT_ERROR"]["headers"]


def test_blueprints_still_collect_doc_callbacks():
    blp = Blueprint("probe", __name__)
    assert Blueprint._prepare_header_parameters_doc in [getattr(c, "__func__", c) for c in blp._prepare_doc_cbks]
    assert version("flask-smorest").startswith("0.47.")


def test_views_still_carry_their_argument_docs(app):
    # The request guards learn a view's argument locations from smorest's _apidoc.
    with app.app_context():
        trips = handler_for(app, "plans.TruckTrips", "GET")
        patch = handler_for(app, "trucks.TruckByCode", "PATCH")
    assert _locations(trips) == {"query"}
    assert _locations(patch) == {"json"}
    assert _list_valued_query(trips) == frozenset()
    assert [p["name"] for p in patch._apidoc["header_parameters"]] == ["If-Match"]
