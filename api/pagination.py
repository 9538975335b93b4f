"""Pagination of the API's lists: a cursor over a stable order (no page counting on big
tables), 50 rows by default, ``page_size`` up to 500."""

from __future__ import annotations

from rest_framework.pagination import CursorPagination


class CodePagination(CursorPagination):
    """For record lists ordered by site and code."""

    ordering = ("id",)
    page_size = 50
    page_size_query_param = "page_size"
    max_page_size = 500


class ResultPagination(CodePagination):
    """For result lists (findings): newest rows last, by id."""

    ordering = ("id",)
