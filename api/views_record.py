"""The record as resources: list and detail of every kind of record under
``/api/v1/sites/{site}/…``, and create (``POST`` on the list), change (``PATCH``) and delete
(``DELETE``) through the entity services of ``inventory.services`` — never a model's ``save``
here.

Each kind is one ``Resource``: its selector, its output and write serializers, and how a
validated body becomes the service call. Changes and deletes need ``If-Match`` with the
``ETag`` of a read (the site's revision: any write to the site bumps it): 428 without it, 412
when stale. A broken rule of the record is a 400 naming the field (``inputs/2/from``); a code
that exists already is a 409, and so is a delete of something still wired or referenced.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, ClassVar

from django.core.exceptions import ValidationError as DjangoValidationError
from django.db import transaction
from django.db.models import Model, QuerySet
from django_filters.rest_framework import DjangoFilterBackend
from drf_spectacular.openapi import AutoSchema
from drf_spectacular.utils import OpenApiResponse
from rest_framework import generics, serializers, status
from rest_framework.filters import OrderingFilter
from rest_framework.request import Request
from rest_framework.response import Response

from analysis import selectors as results
from api import filters
from api import record_serializers as rs
from api import serializers as out
from api.errors import CodeNotFound, Conflict, FieldErrors, PreconditionFailed, PreconditionRequired
from api.views import SiteScoped, etag
from inventory import models as inv
from inventory import selectors as records
from inventory import services

# ---------------------------------------------------------------------------------------------
# the pieces every write shares


def _field(key: str, renamed: dict[str, str]) -> str:
    """A service's error key (``set_name``, ``inputs.2.from``, ``__all__``) as the API's field
    path (``set``, ``inputs/2/from``, the empty path for the whole object)."""
    if key == services.NON_FIELD:
        return ""
    head, *rest = key.split(".")
    return "/".join([renamed.get(head, head), *rest])


def _refusal(exc: DjangoValidationError, renamed: dict[str, str]) -> list[tuple[str, str]]:
    if not hasattr(exc, "error_dict"):
        return [("", m) for m in exc.messages]
    return [(_field(k, renamed), m) for k, msgs in exc.message_dict.items() for m in msgs]


def guarded_write(request: Request, site: inv.Site, write: Callable[[], Any]) -> Any:
    """Run ``write`` (a service call) only if ``If-Match`` names the site's current revision,
    with the site locked from the comparison to the commit."""
    if "HTTP_IF_MATCH" not in request.META:
        raise PreconditionRequired()
    with transaction.atomic():
        locked = inv.Site.objects.select_for_update().get(pk=site.pk)
        # A proxy that compresses the body may have weakened the ETag (W/"..."): the revision
        # in it is the same.
        given = request.META["HTTP_IF_MATCH"].strip().removeprefix("W/")
        if given not in {etag(locked), "*"}:
            raise PreconditionFailed()
        return write()


def _by_code(model: Any, site: inv.Site, code: str | None, what: str) -> Any:
    """A coded object the body names (``equipment``, ``bus``), or a 400 saying which exist."""
    if code is None:
        return None
    found = model.objects.filter(site=site, code=code).first()
    if found is None:
        known = records.codes(model, site_id=site.pk)
        hint = ", ".join(sorted(known)[:10]) or "none yet"
        raise FieldErrors(
            "the change names something the site does not have; nothing was written",
            [(what, f"no {what} {code!r} at site {site.code} (there are: {hint})")],
        )
    return found


def _set_fields(obj: Model, data: dict[str, Any], fields: tuple[str, ...]) -> None:
    for name in fields:
        if name in data:
            setattr(obj, name, data[name])


# ---------------------------------------------------------------------------------------------
# how each kind of record is written


def _bus(request: Request, bus: inv.Bus, data: dict[str, Any]) -> None:
    _set_fields(bus, data, ("code", "kv", "three_phase_fault_ka", "ground_fault_ka", "x_over_r"))
    services.bus_save(bus=bus)


def _equipment(request: Request, equipment: inv.Equipment, data: dict[str, Any]) -> None:
    _set_fields(equipment, data, ("code", "kind", "in_service", "max_load_a"))
    if "bus" in data:
        equipment.bus = _by_code(inv.Bus, equipment.site, data["bus"], "bus")
    services.equipment_save(equipment=equipment)


def _terminal_block(request: Request, block: inv.TerminalBlock, data: dict[str, Any]) -> None:
    _set_fields(block, data, ("code", "description"))
    services.terminal_block_save(block=block)


_CT_FIELDS = (
    "code",
    "phase",
    "secondary_a",
    "accuracy",
    "rated_burden_va",
    "knee_v",
    "winding_ohm",
    "rating_factor",
    "excitation",
    "nameplate",
)


def _ct(request: Request, ct: inv.CurrentTransformer, data: dict[str, Any]) -> None:
    _set_fields(ct, data, _CT_FIELDS)
    if "set" in data:
        ct.set_name = data["set"]
    if "equipment" in data:
        ct.equipment = _by_code(inv.Equipment, ct.site, data["equipment"], "equipment")
    in_use = data.get("in_use")
    services.ct_save(
        ct=ct,
        terminals=data.get("terminals"),
        in_use=None if in_use is None else (in_use[0], in_use[1]),
        by=request.user.get_username(),
        reason=data.get("reason", ""),
    )


def _device(request: Request, device: inv.Device, data: dict[str, Any]) -> None:
    _set_fields(device, data, ("code", "kind", "functions", "ratio_setting"))
    services.device_save(
        device=device,
        inputs=None if "inputs" not in data else [dict(i) for i in data["inputs"]],
        outputs=None if "outputs" not in data else [dict(o) for o in data["outputs"]],
    )


def _ends(row: Model, names: tuple[str, str]) -> tuple[str, str]:
    a, b = (getattr(row, n) for n in names)
    return (a.label, b.label)


def _wire(request: Request, wire: inv.Wire, data: dict[str, Any]) -> None:
    _set_fields(wire, data, ("size", "material", "length_m", "length_ft", "r_ohm"))
    old = _ends(wire, ("from_terminal", "to_terminal")) if wire.pk else (None, None)
    ends = (data.get("from", old[0]), data.get("to", old[1]))
    services.wire_save(wire=wire, ends=ends)  # type: ignore[arg-type]


def _link(request: Request, link: inv.Link, data: dict[str, Any]) -> None:
    between = data.get("between") or _ends(link, ("a", "b"))
    services.link_save(link=link, ends=(between[0], between[1]))


def _ground(request: Request, ground: inv.Ground, data: dict[str, Any]) -> None:
    terminal = data.get("terminal") or ground.terminal.label
    services.ground_save(ground=ground, terminal=terminal)


def _switch(request: Request, switch: inv.Switch, data: dict[str, Any]) -> None:
    _set_fields(switch, data, ("code", "kind", "transition"))
    positions, normal = data.get("positions"), data.get("normal")
    if switch.pk and (positions is None) != (normal is None):
        # One of the two changes: the other is what the switch has now.
        now = list(switch.positions.order_by("order"))
        positions = positions or [p.name for p in now]
        normal = normal or next((p.name for p in now if p.is_normal), None)
    contacts = data.get("contacts")
    services.switch_save(
        switch=switch,
        positions=positions,
        normal=normal,
        contacts=None if contacts is None else [dict(c) for c in contacts],
    )


def _procedure(request: Request, procedure: inv.Procedure, data: dict[str, Any]) -> None:
    _set_fields(procedure, data, ("code", "title", "author", "devices"))
    services.procedure_save(procedure=procedure, steps=data.get("steps"))


@dataclass(frozen=True)
class Resource:
    """One kind of record as an API resource."""

    noun: str
    model: Any  # a model class of ``inventory.models``
    queryset: Callable[..., QuerySet]
    output: type[serializers.Serializer]
    write: type[serializers.Serializer]
    save: Callable[[Request, Any, dict[str, Any]], None]
    delete: Callable[[Any], None]
    key: str = "code"  # wires, links and grounds have no code: their ``id`` names them
    renamed: dict[str, str] = field(default_factory=dict)
    ordering: tuple[str, ...] = ("code",)
    filterset: Any = None


BUS = Resource(
    "bus",
    inv.Bus,
    records.buses_queryset,
    rs.BusSerializer,
    rs.BusWriteSerializer,
    _bus,
    lambda o: services.bus_delete(bus=o),
)
EQUIPMENT = Resource(
    "equipment",
    inv.Equipment,
    records.equipment_queryset,
    rs.EquipmentSerializer,
    rs.EquipmentWriteSerializer,
    _equipment,
    lambda o: services.equipment_delete(equipment=o),
    filterset=filters.EquipmentFilter,
)
TERMINAL_BLOCK = Resource(
    "terminal block",
    inv.TerminalBlock,
    records.terminal_blocks_queryset,
    rs.TerminalBlockSerializer,
    rs.TerminalBlockWriteSerializer,
    _terminal_block,
    lambda o: services.terminal_block_delete(block=o),
)
CT = Resource(
    "CT",
    inv.CurrentTransformer,
    records.cts_queryset,
    out.CTSerializer,
    rs.CTWriteSerializer,
    _ct,
    lambda o: services.ct_delete(ct=o),
    renamed={"set_name": "set"},
    filterset=filters.CTFilter,
)
DEVICE = Resource(
    "device",
    inv.Device,
    records.devices_queryset,
    out.DeviceSerializer,
    rs.DeviceWriteSerializer,
    _device,
    lambda o: services.device_delete(device=o),
    filterset=filters.DeviceFilter,
)
WIRE = Resource(
    "wire",
    inv.Wire,
    records.wires_queryset,
    rs.WireSerializer,
    rs.WireWriteSerializer,
    _wire,
    lambda o: services.wire_delete(wire=o),
    key="id",
    renamed={"from_terminal": "from", "to_terminal": "to"},
    ordering=("id",),
    filterset=filters.WireFilter,
)
LINK = Resource(
    "link",
    inv.Link,
    records.links_queryset,
    rs.LinkSerializer,
    rs.LinkWriteSerializer,
    _link,
    lambda o: services.link_delete(link=o),
    key="id",
    renamed={"a": "between/0", "b": "between/1"},
    ordering=("id",),
)
GROUND = Resource(
    "ground",
    inv.Ground,
    records.grounds_queryset,
    rs.GroundSerializer,
    rs.GroundWriteSerializer,
    _ground,
    lambda o: services.ground_delete(ground=o),
    key="id",
    ordering=("id",),
)
SWITCH = Resource(
    "switch",
    inv.Switch,
    records.switches_queryset,
    rs.SwitchSerializer,
    rs.SwitchWriteSerializer,
    _switch,
    lambda o: services.switch_delete(switch=o),
    filterset=filters.SwitchFilter,
)
PROCEDURE = Resource(
    "procedure",
    inv.Procedure,
    records.procedures_queryset,
    out.ProcedureSerializer,
    rs.ProcedureWriteSerializer,
    _procedure,
    lambda o: services.procedure_delete(procedure=o),
)


# ---------------------------------------------------------------------------------------------
# the schema of a resource's operations


class RecordSchema(AutoSchema):
    """Request and response bodies from the view's ``resource``: the write serializer in, the
    output serializer out; 201 on create, 204 on delete."""

    def get_request_serializer(self) -> Any:
        view: Any = self.view
        if self.method in {"POST", "PATCH", "PUT"}:
            return view.write_serializer()
        return None

    def get_response_serializers(self) -> Any:
        view: Any = self.view
        if self.method == "DELETE":
            return {204: OpenApiResponse(description="deleted")}
        if self.method == "POST":
            return {201: view.output_serializer()}
        return view.output_serializer()


def _saved_response(view: Any, obj: Any, code: int = status.HTTP_200_OK) -> Response:
    site = inv.Site.objects.get(pk=view.site.pk)
    fresh = view.resource.queryset(site_id=site.pk).get(pk=obj.pk)
    response = Response(view.render_one(fresh), status=code)
    response["ETag"] = etag(site)
    return response


class _Resourceful:
    """What the schema and the writes ask of a resource's views."""

    resource: ClassVar[Resource]
    get_serializer_context: Callable[[], dict[str, Any]]

    def output_serializer(self) -> Any:
        return self.resource.output

    def write_serializer(self) -> Any:
        return self.resource.write

    def render_one(self, obj: Any) -> Any:
        return self.resource.output(obj, context=self.get_serializer_context()).data


class RecordList(_Resourceful, SiteScoped, generics.ListAPIView):
    """Base of the lists: ``GET`` (cursor pages, filters, ``ordering``) and ``POST``."""

    schema = RecordSchema()
    filter_backends = [DjangoFilterBackend, OrderingFilter]
    filterset_class: Any = None
    ordering: Any = None
    ordering_fields: Any = None

    def __init_subclass__(cls, **kwargs: Any) -> None:
        super().__init_subclass__(**kwargs)
        cls.serializer_class = cls.resource.output
        cls.filterset_class = cls.resource.filterset
        cls.ordering = cls.resource.ordering
        cls.ordering_fields = list(cls.resource.ordering)

    def get_queryset(self) -> Any:
        if getattr(self, "swagger_fake_view", False):  # the schema generator
            return self.resource.model.objects.none()
        return self.resource.queryset(site_id=self.site.pk)

    def list(self, request: Request, *args: Any, **kwargs: Any) -> Response:
        response = super().list(request, *args, **kwargs)
        response["ETag"] = etag(self.site)
        return response

    def post(self, request: Request, site: str) -> Response:
        """Create one; a code that exists already is a 409 (change it with ``PATCH``)."""
        body = self.resource.write(data=request.data)
        body.is_valid(raise_exception=True)
        data = dict(body.validated_data)
        res = self.resource
        if res.key == "code" and res.model.objects.filter(site=self.site, code=data["code"]):
            raise Conflict(
                f"{res.noun} {data['code']!r} exists at site {self.site.code}: "
                "change it with PATCH on its URL"
            )
        obj = res.model(site=self.site)
        try:
            with transaction.atomic():
                res.save(request, obj, data)
        except DjangoValidationError as exc:
            raise FieldErrors(
                f"the new {res.noun} breaks a rule of the record; nothing was written",
                _refusal(exc, res.renamed),
            ) from exc
        return _saved_response(self, obj, status.HTTP_201_CREATED)


class RecordDetail(_Resourceful, SiteScoped, generics.GenericAPIView):
    """Base of the details: ``GET``, ``PATCH`` and ``DELETE`` (both with ``If-Match``)."""

    schema = RecordSchema()
    filter_backends: list[Any] = []
    pagination_class = None

    def __init_subclass__(cls, **kwargs: Any) -> None:
        super().__init_subclass__(**kwargs)
        cls.serializer_class = cls.resource.output

    def get_object(self) -> Any:
        res = self.resource
        key = self.kwargs[res.key]
        qs = res.queryset(site_id=self.site.pk)
        if res.key == "id":
            number = key.isascii() and key.isdigit() and len(key) < 19
            found = qs.filter(pk=int(key)).first() if number else None
            if found is None:
                raise CodeNotFound(res.noun, key, [], self.site.code)
            return found
        found = qs.filter(code=key).first()
        if found is None:
            known = records.codes(res.model, site_id=self.site.pk)
            raise CodeNotFound(res.noun, key, known, self.site.code)
        return found

    def get(self, request: Request, *args: Any, **kwargs: Any) -> Response:
        response = Response(self.render_one(self.get_object()))
        response["ETag"] = etag(self.site)
        return response

    def patch(self, request: Request, *args: Any, **kwargs: Any) -> Response:
        """Change what the body names, through the service, with ``If-Match``."""
        obj = self.get_object()
        if "HTTP_IF_MATCH" not in request.META:
            raise PreconditionRequired()
        body = self.resource.write(data=request.data, partial=True)
        body.is_valid(raise_exception=True)
        res = self.resource
        try:
            guarded_write(
                request, self.site, lambda: res.save(request, obj, dict(body.validated_data))
            )
        except DjangoValidationError as exc:
            raise FieldErrors(
                f"the change to the {res.noun} was refused; nothing was written",
                _refusal(exc, res.renamed),
            ) from exc
        return _saved_response(self, obj)

    def delete(self, request: Request, *args: Any, **kwargs: Any) -> Response:
        """Delete through the service, with ``If-Match``; refused (409) while in use."""
        obj = self.get_object()
        try:
            guarded_write(request, self.site, lambda: self.resource.delete(obj))
        except DjangoValidationError as exc:
            raise Conflict(
                f"the {self.resource.noun} cannot be deleted; nothing was written",
                _refusal(exc, self.resource.renamed),
            ) from exc
        response = Response(status=status.HTTP_204_NO_CONTENT)
        response["ETag"] = etag(inv.Site.objects.get(pk=self.site.pk))
        return response


def _views(resource: Resource, name: str) -> tuple[type, type]:
    doc = resource.output.__doc__ or ""
    listing = type(
        f"{name}List",
        (RecordList,),
        {"resource": resource, "__doc__": f"A site's {resource.noun} records. {doc}"},
    )
    detail = type(
        f"{name}Detail",
        (RecordDetail,),
        {"resource": resource, "__doc__": f"One {resource.noun}. {doc}"},
    )
    return listing, detail


BusList, BusDetail = _views(BUS, "Bus")
EquipmentList, EquipmentDetail = _views(EQUIPMENT, "Equipment")
TerminalBlockList, TerminalBlockDetail = _views(TERMINAL_BLOCK, "TerminalBlock")
CTList, CTDetail = _views(CT, "CT")
DeviceList, DeviceDetail = _views(DEVICE, "Device")
WireList, WireDetail = _views(WIRE, "Wire")
LinkList, LinkDetail = _views(LINK, "Link")
GroundList, GroundDetail = _views(GROUND, "Ground")
SwitchList, SwitchDetail = _views(SWITCH, "Switch")


class ProcedureList(RecordList):
    """A site's procedures with their steps and their stored verdict (``safe``)."""

    resource = PROCEDURE

    def get_serializer_context(self) -> dict[str, Any]:
        context = super().get_serializer_context()
        if not getattr(self, "swagger_fake_view", False):
            context["verdicts"] = results.procedure_verdict_rows(site_id=self.site.pk)
        return context


class ProcedureDetail(RecordDetail):
    """A procedure, its steps and its stored verdict (the full verdict JSON under
    ``verdict``, null until computed)."""

    resource = PROCEDURE

    def output_serializer(self) -> Any:
        return out.ProcedureDetailSerializer

    def render_one(self, obj: Any) -> Any:
        verdicts = results.procedure_verdict_rows(site_id=self.site.pk)
        body = out.ProcedureSerializer(obj, context={"verdicts": verdicts}).data
        row = verdicts.get(obj.code)
        body["verdict"] = None if row is None else row.verdict
        return body


# ---------------------------------------------------------------------------------------------
# sites


def _site_fields(request: Request, site: inv.Site, data: dict[str, Any]) -> None:
    _set_fields(site, data, ("code", "name", "design_temp_c", "notes"))
    services.site_save(site=site)


class SiteList(generics.ListAPIView):
    """Every site with its counts and whether its stored results are current; ``POST``
    creates an empty site (fill it with the record's resources or an import)."""

    serializer_class = out.SiteSerializer
    queryset = results.sites_overview()
    pagination_class = None
    filter_backends: list[Any] = []
    schema = RecordSchema()

    def output_serializer(self) -> Any:
        return out.SiteSerializer

    def write_serializer(self) -> Any:
        return rs.SiteWriteSerializer

    def post(self, request: Request) -> Response:
        body = rs.SiteWriteSerializer(data=request.data)
        body.is_valid(raise_exception=True)
        data = dict(body.validated_data)
        if inv.Site.objects.filter(code=data["code"]).exists():
            raise Conflict(f"site {data['code']!r} exists: change it with PATCH on its URL")
        site = inv.Site()
        try:
            with transaction.atomic():
                _site_fields(request, site, data)
        except DjangoValidationError as exc:
            raise FieldErrors(
                "the new site was refused; nothing was written", _refusal(exc, {})
            ) from exc
        row = results.sites_overview().get(pk=site.pk)
        response = Response(out.SiteSerializer(row).data, status=status.HTTP_201_CREATED)
        response["ETag"] = etag(site)
        return response


class SiteDetail(SiteScoped, generics.GenericAPIView):
    """One site with its counts and the state of its stored results; ``PATCH`` changes its
    own fields, ``DELETE`` removes it with its whole record (both with ``If-Match``)."""

    serializer_class = out.SiteSerializer
    schema = RecordSchema()
    filter_backends: list[Any] = []
    pagination_class = None
    output_serializer = SiteList.output_serializer
    write_serializer = SiteList.write_serializer

    def _body(self, pk: int) -> Response:
        row = results.sites_overview().get(pk=pk)
        response = Response(out.SiteSerializer(row).data)
        response["ETag"] = etag(row)
        return response

    def get(self, request: Request, site: str) -> Response:
        return self._body(self.site.pk)

    def patch(self, request: Request, site: str) -> Response:
        if "HTTP_IF_MATCH" not in request.META:
            raise PreconditionRequired()
        body = rs.SiteWriteSerializer(data=request.data, partial=True)
        body.is_valid(raise_exception=True)
        obj = self.site
        try:
            guarded_write(
                request, obj, lambda: _site_fields(request, obj, dict(body.validated_data))
            )
        except DjangoValidationError as exc:
            raise FieldErrors(
                "the change to the site was refused; nothing was written", _refusal(exc, {})
            ) from exc
        return self._body(obj.pk)

    def delete(self, request: Request, site: str) -> Response:
        obj = self.site
        guarded_write(request, obj, lambda: services.site_delete(site=obj))
        return Response(status=status.HTTP_204_NO_CONTENT)
