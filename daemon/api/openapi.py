"""The OpenAPI 3.1 document of the route table.

Served at /v1/openapi.json and committed as daemon/openapi.json (a test keeps the two
equal); regenerate it after a deliberate change with
``python -m taprig.daemon.api --openapi > daemon/openapi.json``.
"""

from __future__ import annotations

import json

from taprig.schema import API_VERSION

from .errors import phrase
from .routes import JSON, ROUTES, Payload, Route


def openapi() -> Payload:
    """The OpenAPI 3.1 document of `ROUTES`."""
    paths: dict[str, Payload] = {}
    for r in ROUTES:
        op: Payload = {"operationId": r.op, "summary": r.summary}
        if r.public:
            op["security"] = []
        if r.params:
            op["parameters"] = [
                {"name": p.name, "in": p.where, "required": p.where == "path",
                 "description": p.doc, "schema": p.schema}
                for p in r.params
            ]  # fmt: skip
        if r.body is not None:
            op["requestBody"] = {"required": True, "content": {JSON: {"schema": r.body}}}
        responses: Payload = {str(r.ok): {"description": phrase(r.ok),
                                          "content": {m: {} for m in r.media}}}  # fmt: skip
        for status in sorted(set(r.errors) | _default_errors(r)):
            responses[str(status)] = {"$ref": f"#/components/responses/{status}"}
        op["responses"] = responses
        paths.setdefault(r.path, {})[r.method.lower()] = op
    statuses = sorted({s for r in ROUTES for s in set(r.errors) | _default_errors(r)})
    return {
        "openapi": "3.1.0",
        "info": {"title": "taprig rig service", "version": str(API_VERSION)},
        "paths": paths,
        "security": [{"bearer": []}],
        "components": {
            "securitySchemes": {"bearer": {"type": "http", "scheme": "bearer"}},
            "schemas": {"Error": {
                "type": "object", "required": ["error"],
                "properties": {"error": {"type": "string"}, "message": {"type": "string"}},
            }},
            "responses": {
                str(s): {"description": phrase(s),
                         "content": {JSON: {"schema": {"$ref": "#/components/schemas/Error"}}}}
                for s in statuses
            },
        },
    }  # fmt: skip


def _default_errors(r: Route) -> set[int]:
    out = {405}
    if not r.public:
        out |= {401, 429, 503}
    if r.params:
        out.add(400)
    if r.body is not None:
        out |= {400, 413, 415}
    return out


def openapi_text() -> str:
    """The document as committed in daemon/openapi.json."""
    return json.dumps(openapi(), indent=2) + "\n"
