"""One error shape for every API error (400, 401, 403, 404, 405, 409, 413, 415, 429, …)::

    {"status": 404, "code": "not_found", "detail": "no CT 'CB-10-A' at site QFN",
     "errors": [{"field": "steps/2/to", "message": "..."}],
     "did_you_mean": ["CB-101-A", "CB-110-A"]}

``errors`` lists each field problem with its path (a JSON pointer without the leading slash
for request bodies, the site file's own JSON pointer for site files); ``did_you_mean`` is
present on a 404 for a code, with the nearest codes that exist.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable
from typing import Any

from django.core.exceptions import PermissionDenied, RequestDataTooBig
from django.http import Http404
from rest_framework import exceptions, status
from rest_framework.response import Response
from rest_framework.views import exception_handler as drf_exception_handler


def nearest(code: str, known: Iterable[str], n: int = 5) -> list[str]:
    """The codes of ``known`` nearest to ``code`` (case-insensitive), best first."""
    by_upper: dict[str, str] = {}
    for k in known:
        by_upper.setdefault(k.upper(), k)
    hits = difflib.get_close_matches(code.upper(), list(by_upper), n=n, cutoff=0.5)
    return [by_upper[h] for h in hits]


class CodeNotFound(exceptions.NotFound):
    """A 404 for a code, with the nearest codes that exist."""

    def __init__(self, what: str, code: str, known: Iterable[str], where: str = "") -> None:
        place = f" at site {where}" if where else ""
        super().__init__(f"no {what} {code!r}{place}")
        self.did_you_mean = nearest(code, known)


class FieldErrors(exceptions.ValidationError):
    """A 400 with field paths already worked out: ``[(path, message), …]``."""

    def __init__(self, detail: str, errors: list[tuple[str, str]], *, key: str = "field") -> None:
        super().__init__(detail)
        self.errors = [{key: path, "message": message} for path, message in errors]
        self.summary = detail


class Conflict(exceptions.APIException):
    """A 409: the write clashes with the record as it stands (a code that exists already,
    a delete of something still wired or referenced); ``errors`` say where."""

    status_code = status.HTTP_409_CONFLICT
    default_detail = "the write clashes with the record as it stands"
    default_code = "conflict"

    def __init__(self, detail: str, errors: list[tuple[str, str]] = ()) -> None:  # type: ignore[assignment]
        super().__init__(detail)
        self.errors = [{"field": path, "message": message} for path, message in errors]


class RequestTooLarge(exceptions.APIException):
    status_code = status.HTTP_413_REQUEST_ENTITY_TOO_LARGE
    default_detail = "the request body is larger than this API reads"
    default_code = "too_large"


class PreconditionRequired(exceptions.APIException):
    status_code = 428
    default_detail = "a write to the record needs If-Match with the ETag of your last read"
    default_code = "precondition_required"


class PreconditionFailed(exceptions.APIException):
    status_code = status.HTTP_412_PRECONDITION_FAILED
    default_detail = "the site's record changed since your read: read it again"
    default_code = "precondition_failed"


def _flatten(detail: Any, prefix: str = "") -> list[dict[str, str]]:
    """DRF's nested error detail as ``[{"field": "a/0/b", "message": ...}]``."""
    out: list[dict[str, str]] = []
    if isinstance(detail, dict):
        for key, value in detail.items():
            path = f"{prefix}/{key}" if prefix else str(key)
            if key == "non_field_errors":
                path = prefix
            out += _flatten(value, path)
    elif isinstance(detail, list):
        if all(not isinstance(v, (dict, list)) for v in detail):
            out += [{"field": prefix, "message": str(v)} for v in detail]
        else:
            for i, value in enumerate(detail):
                out += _flatten(value, f"{prefix}/{i}" if prefix else str(i))
    else:
        out.append({"field": prefix, "message": str(detail)})
    return out


def _code(exc: exceptions.APIException) -> str:
    codes = exc.get_codes()
    if isinstance(codes, str):
        return codes
    return getattr(exc, "default_code", "error")


def exception_handler(exc: Exception, context: dict[str, Any]) -> Response | None:
    """DRF's handler, then the body reshaped to the one error shape."""
    if isinstance(exc, RequestDataTooBig):
        # Django's own body limit (DATA_UPLOAD_MAX_MEMORY_SIZE), met when DRF reads the body
        exc = RequestTooLarge(f"the body is larger than this API reads ({exc})")
    elif isinstance(exc, Http404):
        exc = exceptions.NotFound(str(exc) or "not found")
    elif isinstance(exc, PermissionDenied):
        exc = exceptions.PermissionDenied(str(exc) or None)
    response = drf_exception_handler(exc, context)
    if response is None:
        return None
    assert isinstance(exc, exceptions.APIException)
    body: dict[str, Any] = {"status": response.status_code, "code": _code(exc)}
    if isinstance(exc, FieldErrors):
        body.update(code="invalid", detail=exc.summary, errors=exc.errors)
    elif isinstance(exc, exceptions.ValidationError):
        errors = _flatten(exc.detail)
        body.update(
            code="invalid",
            detail=f"{len(errors)} error(s) in the request",
            errors=errors,
        )
    else:
        detail = exc.detail
        body["detail"] = str(detail if not isinstance(detail, (list, dict)) else _flatten(detail))
        body["errors"] = list(getattr(exc, "errors", []))
    if isinstance(exc, CodeNotFound):
        body["did_you_mean"] = exc.did_you_mean
    response.data = body
    return response
