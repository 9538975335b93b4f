"""Reads of the analysis results, each with the answer to "is this stale?".

A result is stale when the revision it was computed from is below the site's current revision
(``inventory.Site.revision`` goes up with every write that changes a circuit). Every selector
here returns that flag beside the result, so no caller can show a stale verdict as current.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any, Literal

from django.db.models import (
    BooleanField,
    Case,
    Count,
    F,
    IntegerField,
    Min,
    OuterRef,
    Q,
    QuerySet,
    Subquery,
    Value,
    When,
)
from django.db.models.functions import Coalesce

from analysis import models
from analysis.engine.findings import SEVERITY_ORDER
from inventory import models as inv
from inventory.choices import ChangeStatus
from inventory.models import Site
from inventory.selectors import site_records
from record import SiteRecord

FINDING_FIELDS = (
    "site",
    "code",
    "severity",
    "ct",
    "device",
    "input",
    "circuit",
    "procedure",
    "step",
    "stage",
    "message",
    "computed_at",
    "stale",
)


def _site_revision() -> Subquery:
    return Subquery(Site.objects.filter(pk=OuterRef("site_id")).values("revision")[:1])


def with_stale(qs: QuerySet) -> QuerySet:
    """Annotate result rows with ``site_revision`` and ``stale`` (in the same query). A row
    whose site no longer exists (no revision to compare with) counts as stale."""
    return qs.annotate(site_revision=_site_revision()).annotate(
        stale=Case(
            When(revision__gte=F("site_revision"), then=Value(False)),
            default=Value(True),
            output_field=BooleanField(),
        )
    )


def findings_queryset(
    *, site: str | None = None, severity: str | None = None, or_worse: bool = False
) -> QuerySet:
    """Findings with ``stale``, most severe first within each site (one query). With
    ``or_worse``, ``severity`` keeps that severity and every worse one (danger > warning >
    caution > notice)."""
    qs = models.Finding.objects.all()
    if site:
        qs = qs.filter(site_code=site)
    if severity and or_worse and severity in SEVERITY_ORDER:
        qs = qs.filter(severity__in=severity_or_worse(severity))
    elif severity:
        qs = qs.filter(severity=severity)
    rank = Case(
        *(When(severity=s, then=Value(i)) for i, s in enumerate(SEVERITY_ORDER)),
        default=Value(len(SEVERITY_ORDER)),
        output_field=IntegerField(),
    )
    return (
        with_stale(qs)
        .annotate(severity_rank=rank)
        .order_by("site_code", "severity_rank", "code", "procedure", "step", "ct", "device", "id")
    )


def finding_json(row: models.Finding) -> dict[str, Any]:
    """One finding as design.md's findings JSON writes it."""
    return {
        "site": row.site_code,
        "code": row.code,
        "severity": row.severity,
        "ct": row.ct,
        "device": row.device,
        "input": row.input,
        "circuit": row.circuit,
        "procedure": row.procedure,
        "step": row.step,
        "stage": row.stage,
        "message": row.message,
        "computed_at": row.computed_at.isoformat().replace("+00:00", "Z"),
        "stale": bool(row.stale),  # type: ignore[attr-defined]  # annotated by the query
    }


def findings_list(
    *, site: str | None = None, severity: str | None = None, or_worse: bool = False
) -> list[dict]:
    """The findings JSON of design.md (the ``findings --json`` body), one query."""
    rows = findings_queryset(site=site, severity=severity, or_worse=or_worse)
    return [finding_json(row) for row in rows]


def site_status(*, site: str) -> dict[str, Any]:
    """Where a site's results stand: its revision, the revision of its stored results (None
    when never computed), when, and whether they are stale. One query."""
    row = (
        Site.objects.filter(code=site)
        .annotate(
            computed_revision=Subquery(
                models.SiteComputation.objects.filter(site_id=OuterRef("pk")).values("revision")[:1]
            ),
            computed_at=Subquery(
                models.SiteComputation.objects.filter(site_id=OuterRef("pk")).values("computed_at")[
                    :1
                ]
            ),
            computed_status=Subquery(
                models.SiteComputation.objects.filter(site_id=OuterRef("pk")).values("status")[:1]
            ),
            computed_error=Subquery(
                models.SiteComputation.objects.filter(site_id=OuterRef("pk")).values("error")[:1]
            ),
        )
        .values(
            "pk",
            "code",
            "revision",
            "computed_revision",
            "computed_at",
            "computed_status",
            "computed_error",
        )
        .get()
    )
    computed = row["computed_revision"]
    stale = computed is None or computed < row["revision"]
    return {
        "site": row["code"],
        "revision": row["revision"],
        "computed_revision": computed,
        "computed_at": row["computed_at"],
        "stale": stale,
        "status": results_status(computed, row["revision"], row["computed_status"]),
        "error": row["computed_error"] or None,
    }


ResultsStatus = Literal["none", "stale", "failed", "ok"]


def results_status(
    computed_revision: int | None, revision: int, status: str | None
) -> ResultsStatus:
    """Where a site's results stand, in one word: ``none`` (never computed), ``stale`` (older
    than the record: a recompute is due), ``failed`` (the record's revision could not be
    computed or written: see its ``results_not_computed`` finding) or ``ok``."""
    if computed_revision is None:
        return "none"
    if computed_revision < revision:
        return "stale"
    return "failed" if status == models.ComputationStatus.FAILED else "ok"


def stale_site_ids() -> list[int]:
    """Sites whose stored results are missing or older than their record."""
    computed = models.SiteComputation.objects.filter(site_id=OuterRef("pk")).values("revision")
    return list(
        Site.objects.annotate(computed_revision=Subquery(computed[:1]))
        .filter(Q(computed_revision__isnull=True) | Q(computed_revision__lt=F("revision")))
        .order_by("pk")
        .values_list("pk", flat=True)
    )


def stale_site_count() -> int:
    """How many sites have stored results missing or older than their record (one query)."""
    computed = models.SiteComputation.objects.filter(site_id=OuterRef("pk")).values("revision")
    return (
        Site.objects.annotate(computed_revision=Subquery(computed[:1]))
        .filter(Q(computed_revision__isnull=True) | Q(computed_revision__lt=F("revision")))
        .count()
    )


def pending_requests() -> tuple[int, Any]:
    """The recompute requests (outbox rows) not done yet: how many, and when the oldest was
    made (None when there is none). One query."""
    row = inv.SiteChange.objects.filter(status=ChangeStatus.PENDING).aggregate(
        n=Count("pk"), oldest=Min("created_at")
    )
    return row["n"], row["oldest"]


def ct_report(*, site: str, ct: str) -> tuple[dict, bool] | None:
    """The stored CT report JSON and whether it is stale, or None when not computed."""
    row = with_stale(models.CTReport.objects.filter(site_code=site, ct=ct)).first()
    return None if row is None else (row.report, bool(row.stale))


def ct_ratings(*, site: str, ct: str) -> QuerySet:
    """The CT's ratings per case, with ``stale``."""
    return with_stale(models.CTRating.objects.filter(site_code=site, ct=ct)).order_by("case")


def procedure_verdict(*, site: str, procedure: str) -> tuple[dict, bool] | None:
    """The stored verdict JSON of a procedure and whether it is stale (a stale verdict must
    not be shown as current), or None when not computed."""
    row = with_stale(
        models.ProcedureVerdict.objects.filter(site_code=site, procedure=procedure)
    ).first()
    return None if row is None else (row.verdict, bool(row.stale))


def circuits_sharing_ct(*, site_id: int, ct: str) -> QuerySet:
    """Every member (CTs and devices) of the circuits the CT belongs to: one query, an
    indexed self-join on (site_id, kind, code) then (site_id, circuit_key)."""
    keys = models.CircuitMember.objects.filter(
        site_id=site_id, kind=models.CircuitMember.Kind.CT, code=ct
    ).values("circuit_key")
    return models.CircuitMember.objects.filter(site_id=site_id, circuit_key__in=keys).order_by(
        "circuit_key", "kind", "code"
    )


def chunk_inputs(
    site_ids: Iterable[int], *, skip_current: bool = False
) -> tuple[dict[int, tuple[str, int]], dict[int, SiteRecord]]:
    """What a recompute chunk reads: ``{site id: (code, revision)}`` of the sites that still
    exist, and the site records of those to compute, with a constant number of queries
    whatever the number of sites. With ``skip_current`` a site whose stored results are at its
    current revision gets no record (nothing to do).

    The revisions are read *before* the records: on READ COMMITTED an edit can commit in
    between, and then the results are labelled with an older revision than their inputs, so
    they look stale and get recomputed. The other order could label old inputs as current.
    """
    ids = sorted(set(site_ids))
    rows = Site.objects.filter(pk__in=ids).annotate(
        computed_revision=Subquery(
            models.SiteComputation.objects.filter(site_id=OuterRef("pk")).values("revision")[:1]
        )
    )
    heads: dict[int, tuple[str, int]] = {}
    todo: list[int] = []
    for pk, code, revision, computed in rows.values_list(
        "pk", "code", "revision", "computed_revision"
    ):
        heads[pk] = (code, revision)
        if not (skip_current and computed is not None and computed >= revision):
            todo.append(pk)
    records = site_records(todo) if todo else {}
    return heads, records


def computed_revisions(site_ids: Iterable[int]) -> dict[int, int]:
    """Revision of the stored results per site (sites never computed are absent)."""
    return dict(
        models.SiteComputation.objects.filter(site_id__in=list(site_ids)).values_list(
            "site_id", "revision"
        )
    )


# ---------------------------------------------------------------------------------------------
# reads for the API (each one query, whatever the number of rows)


def severity_or_worse(severity: str) -> list[str]:
    """``severity`` and every severity above it (``warning`` → danger, warning)."""
    if severity not in SEVERITY_ORDER:
        raise ValueError(f"unknown severity {severity!r} (one of {', '.join(SEVERITY_ORDER)})")
    return list(SEVERITY_ORDER[: SEVERITY_ORDER.index(severity) + 1])


def findings_for_api() -> QuerySet:
    """Every stored finding with ``stale`` (filters and the cursor order come from the API).
    Only the columns of the findings JSON are read (``numbers`` is for machines that read the
    table itself)."""
    columns = (
        "id",
        "site_id",
        "revision",
        *(f for f in FINDING_FIELDS if f not in {"site", "stale"}),
    )
    return with_stale(models.Finding.objects.only("site_code", *columns))


def sites_overview() -> QuerySet:
    """Sites with their record counts and where their stored results stand, one query."""
    computed = models.SiteComputation.objects.filter(site_id=OuterRef("pk"))

    def count(model: Any, field: str = "site_id") -> Subquery:
        return Subquery(
            model.objects.filter(**{field: OuterRef("pk")})
            .order_by()
            .values(field)
            .annotate(n=Count("pk"))
            .values("n")[:1],
            output_field=IntegerField(),
        )

    return Site.objects.annotate(
        n_cts=Coalesce(count(inv.CurrentTransformer), 0),
        n_devices=Coalesce(count(inv.Device), 0),
        n_procedures=Coalesce(count(inv.Procedure), 0),
        computed_revision=Subquery(computed.values("revision")[:1]),
        computed_at=Subquery(computed.values("computed_at")[:1]),
        n_findings=Subquery(computed.values("findings")[:1]),
        n_dangers=Subquery(computed.values("dangers")[:1]),
        n_unsafe_procedures=Subquery(computed.values("unsafe_procedures")[:1]),
        computed_status=Subquery(computed.values("status")[:1]),
        computed_error=Subquery(computed.values("error")[:1]),
    ).order_by("code")


def ct_report_row(*, site_id: int, ct: str) -> models.CTReport | None:
    """The stored report row of a CT with ``stale`` (None when not computed yet)."""
    return with_stale(models.CTReport.objects.filter(site_id=site_id, ct=ct)).first()


def procedure_verdict_rows(*, site_id: int) -> dict[str, models.ProcedureVerdict]:
    """The stored verdict rows of a site's procedures with ``stale``, by procedure code."""
    rows = with_stale(models.ProcedureVerdict.objects.filter(site_id=site_id))
    return {row.procedure: row for row in rows}


def cts_feeding_device(*, site_id: int, device: str) -> QuerySet:
    """The CT members of every circuit the device belongs to (one query, the same indexed
    self-join as ``circuits_sharing_ct``)."""
    keys = models.CircuitMember.objects.filter(
        site_id=site_id, kind=models.CircuitMember.Kind.DEVICE, code=device
    ).values("circuit_key")
    return models.CircuitMember.objects.filter(
        site_id=site_id, circuit_key__in=keys, kind=models.CircuitMember.Kind.CT
    ).order_by("circuit_key", "code")


def site_circuits(*, site_id: int, key: str | None = None) -> list[dict[str, Any]]:
    """A site's stored circuits (or the one with ``key``) with their CTs and devices, ground
    points, ``computed_at`` and ``stale``: two queries whatever the number of circuits."""
    circuits = with_stale(models.Circuit.objects.filter(site_id=site_id)).order_by("key")
    members = models.CircuitMember.objects.filter(site_id=site_id).order_by("kind", "code")
    if key is not None:
        circuits = circuits.filter(key=key)
        members = members.filter(circuit_key=key)
    by_key: dict[str, dict[str, list[str]]] = {}
    for circuit_key, kind, code in members.values_list("circuit_key", "kind", "code"):
        entry = by_key.setdefault(circuit_key, {"cts": [], "devices": []})
        entry["cts" if kind == models.CircuitMember.Kind.CT else "devices"].append(code)
    return [
        {
            "key": c.key,
            "ground_points": c.ground_points,
            **by_key.get(c.key, {"cts": [], "devices": []}),
            "computed_at": c.computed_at.isoformat().replace("+00:00", "Z"),
            "stale": bool(c.stale),
        }
        for c in circuits
    ]


def findings_by_severity(site_ids: Iterable[int]) -> dict[int, dict[str, int]]:
    """Stored findings counted per site and severity (``{site id: {"danger": 2, ...}}``, every
    severity present with 0 where there is none): one grouped query whatever the number of
    sites. The planner pages show it beside ``sites_overview``."""
    ids = list(site_ids)
    counts = {sid: dict.fromkeys(SEVERITY_ORDER, 0) for sid in ids}
    rows = (
        models.Finding.objects.filter(site_id__in=ids)
        .order_by()
        .values_list("site_id", "severity")
        .annotate(n=Count("pk"))
    )
    for site_id, severity, n in rows:
        counts[site_id][severity] = n
    return counts


def circuit_counts(site_ids: Iterable[int]) -> dict[int, int]:
    """Stored secondary circuits per site (from the last computation; absent: never computed)."""
    return dict(
        models.SiteComputation.objects.filter(site_id__in=list(site_ids)).values_list(
            "site_id", "circuits"
        )
    )
