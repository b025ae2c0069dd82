"""The OpenAPI 3.1 document, generated from the operations and their pydantic models.

Why our own thirty lines rather than a framework's generator: the operations already
declare everything (:mod:`shopapp.api.operations`), pydantic writes the JSON Schemas
(OpenAPI 3.1 uses JSON Schema 2020-12 as is), and so requests are parsed by exactly
the models the document shows; the errors keep our one shape; and nothing needs a
browser bundle from the internet (the docs page is rendered on the server).
"""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel
from pydantic.json_schema import models_json_schema

from shopapp.api.operations import API_PREFIX, OPERATIONS, Operation
from shopapp.api.schemas import ErrorBody
from shopapp.core.web import MAX_ID

REF = "#/components/schemas/{model}"
ERROR_TEXT = {
    400: "Bad request (not JSON, a bad header, a control character in the query)",
    401: "No working API token",
    403: "The token's role may not do this",
    404: "No such row",
    409: "Not possible in the row's present state, or an Idempotency-Key reused",
    422: "A field is wrong; `fields` names each one",
}


def _without_null(schema: dict[str, Any]) -> dict[str, Any]:
    """A query parameter is absent rather than null: drop the null branch."""
    options = schema.get("anyOf")
    if isinstance(options, list):
        rest = [o for o in options if o != {"type": "null"}]
        if len(rest) == 1:
            out = {k: v for k, v in schema.items() if k != "anyOf"}
            out.update(rest[0])
            return out
    return schema


def _query_parameters(model: type[BaseModel]) -> list[dict[str, Any]]:
    schema = model.model_json_schema(mode="validation", ref_template=REF)
    required = set(schema.get("required", []))
    params = []
    for name, prop in schema.get("properties", {}).items():
        prop = _without_null(dict(prop))
        description = prop.pop("description", None)
        prop.pop("title", None)
        param: dict[str, Any] = {"name": name, "in": "query", "required": name in required,
                                 "schema": prop}
        if description:
            param["description"] = description
        params.append(param)
    return params


def _operation(op: Operation, refs: dict[Any, Any]) -> dict[str, Any]:
    out: dict[str, Any] = {"operationId": op.endpoint.split(".", 1)[1], "summary": op.summary,
                           "tags": [op.tag]}
    if op.description:
        out["description"] = op.description
    params: list[dict[str, Any]] = [
        {"name": name, "in": "path", "required": True,
         "schema": {"type": "integer", "minimum": 1, "maximum": MAX_ID}}
        for name in op.path_params]
    if op.query is not None:
        params += _query_parameters(op.query)
    if op.writes:
        params.append({"name": "Idempotency-Key", "in": "header", "required": False,
                       "description": "a retry with the same key and body gets the first "
                                      "reply; the same key with another body is a 409",
                       "schema": {"type": "string", "minLength": 1, "maxLength": 200,
                                  "pattern": "^[!-~]+$"}})
    if params:
        out["parameters"] = params
    if op.body is not None:
        out["requestBody"] = {"required": True, "content": {
            "application/json": {"schema": refs[(op.body, "validation")]}}}
    if op.media_type == "application/json":
        content: dict[str, Any] = {"application/json": {
            "schema": refs[(op.response, "serialization")] if op.response else {}}}
    else:
        content = {op.media_type: {"schema": {"type": "string", "format": "binary"}}}
    responses: dict[str, Any] = {str(op.status): {"description": "OK", "content": content}}
    for status in op.errors:
        responses[str(status)] = {
            "description": ERROR_TEXT.get(status, "Refused"),
            "content": {"application/json": {"schema": refs[(ErrorBody, "serialization")]}}}
    out["responses"] = responses
    out["security"] = [{"bearer": []}] if op.action is not None else []
    if op.action is not None:
        out["x-shopapp-permission"] = op.action
    return out


def document(version: str) -> dict[str, Any]:
    """The OpenAPI document of every registered operation."""
    wanted: set[tuple[type[BaseModel], str]] = {(ErrorBody, "serialization")}
    for op in OPERATIONS:
        if op.body is not None:
            wanted.add((op.body, "validation"))
        if op.response is not None:
            wanted.add((op.response, "serialization"))
    keys = sorted(wanted, key=lambda item: (item[0].__name__, item[1]))
    refs, top = models_json_schema(keys, ref_template=REF)  # type: ignore[arg-type]
    paths: dict[str, dict[str, Any]] = {}
    for op in OPERATIONS:
        paths.setdefault(op.path, {})[op.method.lower()] = _operation(op, dict(refs))
    return {
        "openapi": "3.1.0",
        "info": {"title": "shopapp API", "version": version,
                 "description": "Jobs, runs, corrections, certificates and shop measures of "
                                "a rotor-balancing shop. Units are in the field names; angles "
                                "are degrees in the direction of rotation from the reference "
                                "mark."},
        "servers": [{"url": "/"}],
        "paths": paths,
        "components": {"schemas": top.get("$defs", {}),
                       "securitySchemes": {"bearer": {"type": "http", "scheme": "bearer"}}},
        "x-prefix": API_PREFIX,
    }
