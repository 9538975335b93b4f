"""Per-request context: a request id (the caller's ``X-Request-ID`` when it is a sane token,
else a new one, echoed in the response), the log context of ``config.logs``, replica reads for
the API's safe methods (``config.routers``) and one access line per request on the
``loopkeep.request`` logger."""

from __future__ import annotations

import contextlib
import logging
import re
import time
import uuid
from collections.abc import Callable
from typing import Any

from django.http import HttpRequest, HttpResponse

from config import logs
from config.routers import pinned, replica_reads

log = logging.getLogger("loopkeep.request")

_REQUEST_ID = re.compile(r"^[A-Za-z0-9._:-]{1,64}$")
SAFE_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})


class RequestContextMiddleware:
    def __init__(self, get_response: Callable[[HttpRequest], HttpResponse]) -> None:
        self.get_response = get_response

    def __call__(self, request: HttpRequest) -> HttpResponse:
        given = request.headers.get("X-Request-ID", "")
        rid = given if _REQUEST_ID.match(given) else uuid.uuid4().hex
        tokens = [
            (logs.request_id, logs.request_id.set(rid)),
            (logs.request_obj, logs.request_obj.set(request)),
            (logs.site, logs.site.set(None)),
        ]
        reads = (
            replica_reads()
            if request.method in SAFE_METHODS and request.path.startswith("/api/")
            else contextlib.nullcontext()
        )
        started = time.perf_counter()
        try:
            with reads:
                response = self.get_response(request)
                wrote = pinned()
            response["X-Request-ID"] = rid
            log.info(
                "%s %s %s",
                request.method,
                request.path,
                response.status_code,
                extra={
                    "method": request.method,
                    "path": request.path,
                    "status": response.status_code,
                    "duration_ms": round((time.perf_counter() - started) * 1000, 1),
                    "pinned_to_primary": wrote,
                },
            )
            return response
        finally:
            for var, token in reversed(tokens):
                var.reset(token)

    def process_view(
        self, request: HttpRequest, view: Any, args: Any, kwargs: dict[str, Any]
    ) -> None:
        if isinstance(kwargs.get("site"), str):
            logs.site.set(kwargs["site"])
