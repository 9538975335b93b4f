"""Pagination of the API's lists: a cursor over a stable order (no page counting on big
tables), 50 rows by default, ``page_size`` up to 500."""

from __future__ import annotations

from typing import Any

from rest_framework.exceptions import NotFound, ValidationError
from rest_framework.pagination import CursorPagination


class CodePagination(CursorPagination):
    """For record lists ordered by site and code."""

    ordering = ("id",)
    page_size = 50
    page_size_query_param = "page_size"
    max_page_size = 500

    def decode_cursor(self, request: Any) -> Any:
        # A cursor that is not one of ours is a bad request naming the parameter, not a 404.
        try:
            return super().decode_cursor(request)
        except NotFound as exc:
            raise ValidationError({"cursor": ["not a cursor this API gave out"]}) from exc


class ResultPagination(CodePagination):
    """For result lists (findings): newest rows last, by id."""

    ordering = ("id",)
