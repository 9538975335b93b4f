"""OpenAPI post-processing: every operation documents the API's one error shape for the
errors it can answer (drf-spectacular documents the successes from the views)."""

from __future__ import annotations

from typing import Any

ERROR_SCHEMA: dict[str, Any] = {
    "type": "object",
    "description": "The one error shape of the API.",
    "properties": {
        "status": {"type": "integer"},
        "code": {"type": "string"},
        "detail": {"type": "string"},
        "errors": {
            "type": "array",
            "items": {
                "type": "object",
                "properties": {
                    "field": {"type": "string"},
                    "pointer": {"type": "string"},
                    "message": {"type": "string"},
                },
                "required": ["message"],
            },
        },
        "did_you_mean": {"type": "array", "items": {"type": "string"}},
    },
    "required": ["status", "code", "detail", "errors"],
}

IF_MATCH: dict[str, Any] = {
    "in": "header",
    "name": "If-Match",
    "required": True,
    "schema": {"type": "string"},
    "description": "the ETag of your last read of the site's record (428 without it, 412 when "
    "the record changed since)",
}

_TEXT = {
    "400": "invalid request: each error names its field or JSON pointer; nothing was written",
    "401": "not signed in",
    "403": "the account's role does not allow this",
    "404": "unknown code (with the nearest codes that exist)",
    "405": "method not allowed",
    "409": "the write clashes with the record (the code exists, or it is still in use)",
    "412": "the record changed since the ETag given in If-Match",
    "413": "request body too large",
    "415": "unsupported media type",
    "428": "If-Match is required on a write to the record",
    "429": "too many requests",
}


def _link(operation_id: str, key: str, with_etag: bool) -> dict[str, Any]:
    parameters = {"site": "$request.path.site", key: f"$response.body#/{key}"}
    if with_etag:
        parameters["header.If-Match"] = "$response.header.ETag"
    return {"operationId": operation_id, "parameters": parameters}


def add_record_links(result: dict[str, Any], generator: Any, **kwargs: Any) -> dict[str, Any]:
    """drf-spectacular post-processing hook: OpenAPI links from a record's create (201) to
    reading, changing and deleting what it created (its code or id, and the ETag the create
    answered), so stateful clients and tests can follow them."""
    paths = result.get("paths", {})
    for path, item in paths.items():
        created = item.get("post", {}).get("responses", {}).get("201")
        if created is None or not path.startswith("/api/v1/sites/{site}/"):
            continue
        detail = next(
            (
                (p, k)
                for p, k in ((f"{path}{{code}}/", "code"), (f"{path}{{id}}/", "id"))
                if p in paths
            ),
            None,
        )
        if detail is None:
            continue
        detail_path, key = detail
        links = created.setdefault("links", {})
        for method, name, etag in (
            ("get", "Read", False),
            ("patch", "Change", True),
            ("delete", "Delete", True),
        ):
            operation = paths[detail_path].get(method)
            if operation and "operationId" in operation:
                links[f"{name}Created"] = _link(operation["operationId"], key, etag)
    _add_site_links(paths)
    return result


def _add_site_links(paths: dict[str, Any]) -> None:
    """From a new site (201) to reading, changing and deleting it and to creating records in
    it, so a stateful client can build a site up from nothing."""
    created = paths.get("/api/v1/sites/", {}).get("post", {}).get("responses", {}).get("201")
    if created is None:
        return
    links = created.setdefault("links", {})
    site = {"site": "$response.body#/code"}
    for method, name in (("get", "Read"), ("patch", "Change"), ("delete", "Delete")):
        operation = paths.get("/api/v1/sites/{site}/", {}).get(method)
        if operation:
            extra = {"header.If-Match": "$response.header.ETag"} if method != "get" else {}
            links[f"{name}Site"] = {
                "operationId": operation["operationId"],
                "parameters": {**site, **extra},
            }
    for path, item in paths.items():
        operation = item.get("post") or {}
        in_site = path.startswith("/api/v1/sites/{site}/") and path.count("{") == 1
        if in_site and "201" in operation.get("responses", {}):
            links[f"CreateIn_{operation['operationId']}"] = {
                "operationId": operation["operationId"],
                "parameters": site,
            }


def add_error_responses(result: dict[str, Any], generator: Any, **kwargs: Any) -> dict[str, Any]:
    """drf-spectacular post-processing hook: the error responses of every operation."""
    result.setdefault("components", {}).setdefault("schemas", {})["Error"] = ERROR_SCHEMA
    ref = {"application/json": {"schema": {"$ref": "#/components/schemas/Error"}}}
    for path, item in result.get("paths", {}).items():
        for method, operation in item.items():
            codes = ["401", "403", "405", "429"]
            if "{" in path:
                codes.append("404")
            if method in {"post", "put", "patch"} or operation.get("parameters"):
                codes += ["400"]
            if method in {"post", "put", "patch"}:
                codes += ["413", "415"]
            if method in {"post", "delete"}:
                codes += ["409"]
            if method in {"put", "patch", "delete"}:
                codes += ["412", "428"]
                params = operation.setdefault("parameters", [])
                if not any(p.get("name") == "If-Match" for p in params):
                    params.append(IF_MATCH)
            responses = operation.setdefault("responses", {})
            for code in sorted(codes):
                responses.setdefault(code, {"description": _TEXT[code], "content": ref})
    return result
