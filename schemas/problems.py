"""Schemas of RFC 9457 problem details, for the contract and for tests.

The service builds problem bodies itself (they must never fail); these
schemas describe them in openapi.yaml.
"""

from __future__ import annotations

from marshmallow import Schema, fields

from features.errors import UNUSABLE_REASONS


class FieldErrorSchema(Schema):
    """One offending field of a request."""

    field = fields.String(
        required=True, metadata={"description": "Dotted path, e.g. `channels[1].samples`."}
    )
    pointer = fields.String(
        required=True, metadata={"description": "JSON Pointer (RFC 6901) as a URI fragment."}
    )
    detail = fields.String(required=True, metadata={"description": "The rule that was broken."})


class ProblemSchema(Schema):
    """RFC 9457 problem details (media type application/problem+json)."""

    type = fields.String(
        required=True,
        metadata={"description": "URI naming the problem type; `about:blank` for plain HTTP."},
    )
    title = fields.String(required=True, metadata={"description": "Short summary of the type."})
    status = fields.Integer(required=True, metadata={"description": "HTTP status code."})
    detail = fields.String(
        required=True, metadata={"description": "Explanation of this occurrence."}
    )
    request_id = fields.String(
        required=True, metadata={"description": "Id of the request, as in `X-Request-ID`."}
    )


class ValidationProblemSchema(ProblemSchema):
    """422: the request breaks the contract or an engine input rule."""

    errors = fields.List(fields.Nested(FieldErrorSchema), required=True)


class UnusableSignalProblemSchema(ProblemSchema):
    """422: the input is well formed but holds no signal the engine can use."""

    reason = fields.String(
        required=True,
        metadata={
            "description": "Machine-readable reason, one of "
            + ", ".join(f"`{r}`" for r in UNUSABLE_REASONS) + ".",
            "enum": list(UNUSABLE_REASONS),
        },
    )


class ComputeTimeProblemSchema(ProblemSchema):
    """503: the analysis ran past the service's compute-time limit and was stopped."""

    limit_s = fields.Float(
        required=True, metadata={"description": "The limit in seconds (HEARTSWAY_MAX_COMPUTE_S)."}
    )


class HealthSchema(Schema):
    """Body of /healthz and /readyz."""

    status = fields.String(required=True, metadata={"description": "`ok` or `ready`."})
    version = fields.String(required=True, metadata={"description": "Service version."})
