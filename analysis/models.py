"""Results of the analysis and the run log. (The outbox the runs consume is the inventory's
``SiteChange``.)

Result rows hold codes (strings), not foreign keys into the inventory: a site's results are
replaced as a block (delete, then COPY or bulk insert) without touching the record, and a result
can outlive the object it names until the next recompute. Every result row carries the site
``revision`` it was computed from; a result is *stale* when that revision is below the site's
current ``inventory.Site.revision`` (see ``analysis.selectors``).

Writes go through ``analysis.services``; nothing here has side effects in ``save()``.
"""

from __future__ import annotations

from django.db import models
from django.db.models import Q

CASES = (("ground_fault", "ground fault"), ("phase_fault", "phase fault"))


class RunKind(models.TextChoices):
    SITE = "site", "site (after an edit)"
    SITES = "sites", "chosen sites"
    FLEET = "fleet", "whole fleet"


class RunStatus(models.TextChoices):
    PENDING = "pending"
    RUNNING = "running"
    SUCCESS = "success"
    FAILURE = "failure"


class ComputationStatus(models.TextChoices):
    OK = "ok", "computed"
    FAILED = "failed", "could not be computed"


class AnalysisRun(models.Model):
    """One recompute job: which sites, how far it got, what it produced and how long each
    phase took. ``site_ids`` null means the whole fleet as it stood when the run started.
    Without ``force`` a site whose stored results are already at its current revision is
    skipped (outbox deliveries and redeliveries are cheap)."""

    kind = models.CharField(max_length=10, choices=RunKind.choices)
    status = models.CharField(
        max_length=10, choices=RunStatus.choices, default=RunStatus.PENDING, db_index=True
    )
    force = models.BooleanField(default=False)
    site_ids = models.JSONField(null=True, blank=True, help_text="null: every site")
    sites_total = models.PositiveIntegerField(default=0)
    sites_done = models.PositiveIntegerField(default=0, help_text="computed, skipped or failed")
    sites_skipped = models.PositiveIntegerField(
        default=0, help_text="results already at the current (or a newer) revision"
    )
    sites_failed = models.PositiveIntegerField(default=0)
    cts = models.PositiveIntegerField(default=0)
    findings = models.PositiveIntegerField(default=0)
    dangers = models.PositiveIntegerField(default=0)
    verdicts = models.PositiveIntegerField(default=0)
    unsafe_procedures = models.PositiveIntegerField(default=0)
    circuits = models.PositiveIntegerField(default=0)
    read_s = models.FloatField(default=0.0, help_text="time reading the record, summed, s")
    compute_s = models.FloatField(default=0.0, help_text="time in the engine, summed, s")
    write_s = models.FloatField(default=0.0, help_text="time writing results, summed, s")
    created_at = models.DateTimeField(auto_now_add=True)
    started_at = models.DateTimeField(null=True, blank=True)
    finished_at = models.DateTimeField(null=True, blank=True)
    chunk_size = models.PositiveIntegerField(
        default=0, help_text="sites per chunk at the most, once planned"
    )
    chunk_starts = models.JSONField(
        null=True,
        blank=True,
        help_text="where each chunk starts in site_ids, once planned (null: every chunk_size)",
    )
    progress_at = models.DateTimeField(
        null=True, blank=True, help_text="last start or chunk written (the stall sweep's clock)"
    )
    attempts = models.PositiveIntegerField(default=0, help_text="task starts, retries included")
    task_id = models.CharField(max_length=64, blank=True)
    error = models.TextField(blank=True)
    change = models.ForeignKey(
        "inventory.SiteChange",
        on_delete=models.SET_NULL,
        null=True,
        blank=True,
        related_name="+",
        help_text="the record change (outbox row) this site run was sent for",
    )

    class Meta:
        ordering = ["-created_at", "-id"]
        constraints = [
            models.CheckConstraint(
                condition=Q(sites_done__lte=models.F("sites_total")),
                name="analysis_run_done_within_total",
            ),
        ]

    def __str__(self) -> str:
        return f"run {self.pk} ({self.kind}, {self.status}, {self.sites_done}/{self.sites_total})"

    @property
    def duration_s(self) -> float | None:
        if self.started_at and self.finished_at:
            return (self.finished_at - self.started_at).total_seconds()
        return None


class RunChunk(models.Model):
    """A chunk of a run that started: its worker's heartbeat while it runs, and when its results
    were written and counted (``done_at``, set in the write's transaction so a redelivered
    chunk never counts its sites twice). The stall sweep sends again a chunk not done whose
    heartbeat stopped (its worker was killed or lost)."""

    run = models.ForeignKey(AnalysisRun, on_delete=models.CASCADE, related_name="chunks")
    index = models.PositiveIntegerField()
    sites = models.PositiveIntegerField()
    attempts = models.PositiveIntegerField(default=0, help_text="starts, re-sends included")
    heartbeat_at = models.DateTimeField(
        null=True, blank=True, help_text="last sign of life of the worker running it"
    )
    sent_at = models.DateTimeField(
        null=True, blank=True, help_text="last sent again by the stall sweep"
    )
    done_at = models.DateTimeField(
        null=True, blank=True, help_text="results written and counted", db_index=True
    )

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["run", "index"], name="analysis_run_chunk_once"),
        ]

    def __str__(self) -> str:
        return f"run {self.run_id} chunk {self.index} ({self.sites} sites)"


class SiteResult(models.Model):
    """Columns every result row has: the site (id and code, no foreign key), the revision of
    the record it was computed from, when, and by which run."""

    site_id = models.BigIntegerField()
    site_code = models.CharField(max_length=40)
    revision = models.PositiveBigIntegerField()
    computed_at = models.DateTimeField()
    run_id = models.BigIntegerField(null=True, blank=True)

    class Meta:
        abstract = True


class SiteComputation(SiteResult):
    """One row per site: the revision its stored results are at, with their counts. The write
    locks and reads it to refuse replacing newer results with older ones. ``failed``: the
    results of that revision could not be computed or written (``error`` says why, and a
    ``results_not_computed`` danger finding shows it); the results stored before stay, stale."""

    status = models.CharField(
        max_length=10, choices=ComputationStatus.choices, default=ComputationStatus.OK
    )
    error = models.TextField(blank=True)
    cts = models.PositiveIntegerField(default=0)
    findings = models.PositiveIntegerField(default=0)
    dangers = models.PositiveIntegerField(default=0)
    verdicts = models.PositiveIntegerField(default=0)
    unsafe_procedures = models.PositiveIntegerField(default=0)
    circuits = models.PositiveIntegerField(default=0)

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["site_id"], name="analysis_one_computation_per_site"),
        ]

    def __str__(self) -> str:
        return f"{self.site_code} at revision {self.revision}"


class CTRating(SiteResult):
    """Ratings of one CT in one fault case (None where a value is unknown). Burden is the
    external burden at the CT terminals, ohms; currents in A; voltages in V."""

    ct = models.CharField(max_length=60)
    case = models.CharField(max_length=12, choices=CASES)
    burden_r_ohm = models.FloatField(null=True)
    burden_x_ohm = models.FloatField(null=True)
    burden_z_ohm = models.FloatField(null=True)
    fault_a = models.FloatField(null=True, help_text="primary fault current, A")
    secondary_fault_a = models.FloatField(null=True)
    x_over_r = models.FloatField(null=True)
    vx_required_v = models.FloatField(null=True, help_text="IEEE C37.110 saturation voltage")
    vx_available_v = models.FloatField(null=True)
    c37_110_index = models.FloatField(null=True, help_text="(1 + X/R)·If·Zb, per unit; ≤ 20")
    time_to_saturate_ms = models.FloatField(null=True)

    class Meta:
        ordering = ["site_code", "ct", "case"]
        constraints = [
            models.UniqueConstraint(
                fields=["site_id", "ct", "case"], name="analysis_ct_rating_once"
            ),
        ]

    def __str__(self) -> str:
        return f"{self.site_code} {self.ct} {self.case}"


class CTReport(SiteResult):
    """The full CT report JSON of one CT (design.md), as the API and ``ct_report`` serve it."""

    ct = models.CharField(max_length=60)
    report = models.JSONField()

    class Meta:
        ordering = ["site_code", "ct"]
        constraints = [
            models.UniqueConstraint(fields=["site_id", "ct"], name="analysis_ct_report_once"),
        ]

    def __str__(self) -> str:
        return f"{self.site_code} {self.ct} report"


class Finding(SiteResult):
    """A finding of the site's normal state or of a stored procedure (with its step)."""

    code = models.CharField(max_length=40)
    severity = models.CharField(max_length=10)
    # Null, not "", where a finding names no CT/device/...: the findings JSON says null.
    ct = models.CharField(max_length=60, null=True, blank=True)  # noqa: DJ001
    device = models.CharField(max_length=60, null=True, blank=True)  # noqa: DJ001
    input = models.CharField(max_length=30, null=True, blank=True)  # noqa: DJ001
    circuit = models.CharField(max_length=200, null=True, blank=True)  # noqa: DJ001
    procedure = models.CharField(max_length=60, null=True, blank=True)  # noqa: DJ001
    step = models.IntegerField(null=True, blank=True)
    # "before", "transition" or "after" for a procedure finding; null for the normal state.
    stage = models.CharField(max_length=12, null=True, blank=True)  # noqa: DJ001
    message = models.TextField()
    numbers = models.JSONField(default=dict)

    class Meta:
        ordering = ["site_code", "id"]
        indexes = [
            models.Index(fields=["site_id"], name="analysis_finding_site"),
            models.Index(fields=["severity", "code"], name="analysis_finding_severity"),
        ]

    def __str__(self) -> str:
        return f"{self.site_code} {self.code}"


class ProcedureVerdict(SiteResult):
    """The verdict of one stored procedure (design.md's procedure verdict JSON, cautions
    included)."""

    procedure = models.CharField(max_length=60)
    safe = models.BooleanField()
    first_danger = models.JSONField(null=True, blank=True)
    verdict = models.JSONField()

    class Meta:
        ordering = ["site_code", "procedure"]
        constraints = [
            models.UniqueConstraint(fields=["site_id", "procedure"], name="analysis_verdict_once"),
        ]

    def __str__(self) -> str:
        return f"{self.site_code} {self.procedure} ({'safe' if self.safe else 'unsafe'})"


class Circuit(SiteResult):
    """A secondary circuit found in the site's normal state."""

    key = models.CharField(max_length=200)
    ground_points = models.PositiveIntegerField()

    class Meta:
        ordering = ["site_code", "key"]
        constraints = [
            models.UniqueConstraint(fields=["site_id", "key"], name="analysis_circuit_once"),
        ]

    def __str__(self) -> str:
        return f"{self.site_code} {self.key}"


class CircuitMember(SiteResult):
    """A CT or device of a circuit. Keyed by (site, circuit key) rather than a foreign key so a
    site's circuits and members are written in one COPY each; the indexes answer "which
    circuits and devices share this CT" with one indexed self-join."""

    class Kind(models.TextChoices):
        CT = "ct"
        DEVICE = "device"

    circuit_key = models.CharField(max_length=200)
    kind = models.CharField(max_length=6, choices=Kind.choices)
    code = models.CharField(max_length=60)

    class Meta:
        ordering = ["site_code", "circuit_key", "kind", "code"]
        indexes = [
            models.Index(fields=["site_id", "kind", "code"], name="analysis_member_by_code"),
        ]
        constraints = [
            # Also the index by circuit: its leading columns are (site_id, circuit_key).
            models.UniqueConstraint(
                fields=["site_id", "circuit_key", "kind", "code"], name="analysis_member_once"
            ),
        ]

    def __str__(self) -> str:
        return f"{self.site_code} {self.circuit_key}: {self.kind} {self.code}"
