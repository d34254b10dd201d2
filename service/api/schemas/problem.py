"""The RFC 9457 problem document (for the OpenAPI description)."""

import marshmallow as ma

from service.errors import PROBLEM_BASE, PROBLEM_TYPES


class ProblemErrorSchema(ma.Schema):
    pointer = ma.fields.String(metadata={"description": "JSON Pointer to the offending member"})
    detail = ma.fields.String()


class ProblemSchema(ma.Schema):
    type = ma.fields.String(
        validate=ma.validate.OneOf([PROBLEM_BASE + kind for kind in PROBLEM_TYPES]),
        metadata={
            "description": "The problem type: https://ullage.invalid/problems/<kind>, one of the kinds the "
            "README lists under \"Problem types\" (an identifier; it does not resolve)"
        },
    )
    title = ma.fields.String()
    status = ma.fields.Integer()
    detail = ma.fields.String()
    instance = ma.fields.String()
    request_id = ma.fields.String()
    errors = ma.fields.List(ma.fields.Nested(ProblemErrorSchema))
    needed = ma.fields.Dict(
        allow_none=True,
        metadata={
            "description": "Problem type `infeasible` (recording a plan): what would make the plan feasible, "
            "`{trips_per_day, remove_sites}` as in the joint calculation's `needed`"
        },
    )
    sites = ma.fields.List(
        ma.fields.String(),
        metadata={
            "description": "Network plans: the site codes concerned (problem type `planning-input`: sites without "
            "coordinates; `inputs-changed`: sites changed since the plan was computed)"
        },
    )
    trucks = ma.fields.List(
        ma.fields.String(),
        metadata={
            "description": "Network plans: the truck codes concerned (problem type `planning-input`: trucks without "
            "a depot; `inputs-changed`: trucks changed since the plan was computed)"
        },
    )
