"""Filters of the API's lists (django-filter; documented in the OpenAPI schema)."""

from __future__ import annotations

import django_filters as df
from django.db.models import Q, QuerySet

from analysis import models as results
from analysis.engine.findings import SEVERITY_ORDER
from analysis.selectors import severity_or_worse
from inventory import models
from trade.ratio import parse_ratio


class CTFilter(df.FilterSet):
    equipment = df.CharFilter(field_name="equipment__code", help_text="equipment code")
    phase = df.ChoiceFilter(choices=[(p, p) for p in "ABCN"])
    set = df.CharFilter(field_name="set_name", help_text="three-phase set name")
    accuracy = df.CharFilter(
        field_name="accuracy", lookup_expr="iexact", help_text="accuracy class, e.g. C400"
    )
    ratio = df.CharFilter(method="by_ratio", help_text="ratio of the tap in use, e.g. 400:5")

    class Meta:
        model = models.CurrentTransformer
        fields: list[str] = []

    def by_ratio(self, qs: QuerySet, name: str, value: str) -> QuerySet:
        try:
            primary, secondary = parse_ratio(value)
        except ValueError:
            return qs.none()
        return qs.filter(tap_primary_a=primary, secondary_a=secondary)


class DeviceFilter(df.FilterSet):
    kind = df.ChoiceFilter(choices=models.Device._meta.get_field("kind").choices)
    function = df.CharFilter(method="by_function", help_text="IEEE C37.2 device function, e.g. 87B")

    class Meta:
        model = models.Device
        fields: list[str] = []

    def by_function(self, qs: QuerySet, name: str, value: str) -> QuerySet:
        # The functions are a JSON list: match the quoted element in its text, which works
        # the same on PostgreSQL and SQLite.
        return qs.filter(functions__icontains=f'"{value}"')


class EquipmentFilter(df.FilterSet):
    kind = df.ChoiceFilter(choices=models.Equipment._meta.get_field("kind").choices)
    bus = df.CharFilter(field_name="bus__code", help_text="bus code")
    in_service = df.BooleanFilter()

    class Meta:
        model = models.Equipment
        fields: list[str] = []


class WireFilter(df.FilterSet):
    terminal = df.CharFilter(
        method="by_terminal", help_text="an end of the wire, OWNER:NAME (e.g. TB-101:4)"
    )
    owner = df.CharFilter(
        method="by_owner", help_text="an owner at either end (CT, device, terminal block)"
    )

    class Meta:
        model = models.Wire
        fields: list[str] = []

    def by_terminal(self, qs: QuerySet, name: str, value: str) -> QuerySet:
        owner, _, point = value.partition(":")
        return qs.filter(
            Q(from_terminal__owner=owner, from_terminal__name=point)
            | Q(to_terminal__owner=owner, to_terminal__name=point)
        )

    def by_owner(self, qs: QuerySet, name: str, value: str) -> QuerySet:
        return qs.filter(Q(from_terminal__owner=value) | Q(to_terminal__owner=value))


class SwitchFilter(df.FilterSet):
    kind = df.ChoiceFilter(choices=models.Switch._meta.get_field("kind").choices)
    group = df.CharFilter(
        field_name="code", lookup_expr="startswith", help_text="switch group, e.g. TS-101"
    )

    class Meta:
        model = models.Switch
        fields: list[str] = []


class FindingFilter(df.FilterSet):
    site = df.CharFilter(field_name="site_code")
    severity = df.ChoiceFilter(
        choices=[(s, s) for s in SEVERITY_ORDER],
        method="by_severity",
        help_text="this severity or worse (danger > warning > caution > notice)",
    )
    code = df.CharFilter()
    ct = df.CharFilter()
    device = df.CharFilter()
    procedure = df.CharFilter()
    stale = df.TypedChoiceFilter(
        choices=[("true", "true"), ("false", "false")],
        coerce=lambda v: v == "true",
        help_text="true: only findings of results older than their record",
    )

    class Meta:
        model = results.Finding
        fields: list[str] = []

    def by_severity(self, qs: QuerySet, name: str, value: str) -> QuerySet:
        return qs.filter(severity__in=severity_or_worse(value))


class TapChangeFilter(df.FilterSet):
    site = df.CharFilter(field_name="ct__site__code")
    ct = df.CharFilter(field_name="ct__code")
    since = df.IsoDateTimeFilter(field_name="changed_at", lookup_expr="gte")
    until = df.IsoDateTimeFilter(field_name="changed_at", lookup_expr="lt")

    class Meta:
        model = models.TapChange
        fields: list[str] = []


__all__ = [
    "CTFilter",
    "DeviceFilter",
    "EquipmentFilter",
    "FindingFilter",
    "SwitchFilter",
    "TapChangeFilter",
    "WireFilter",
]
