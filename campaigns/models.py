"""Campaign domain: campaigns, quotas, frames, instances and their events (object classes and assets: :mod:`assets`).

Models hold data and constraints only. Every write goes through
:mod:`campaigns.services`; every aggregate read through :mod:`campaigns.selectors`.
Counters (accepted/rejected per class, spend per campaign) are denormalised on
:class:`ClassQuota` and :class:`Campaign` and only ever changed with
database-side ``F()`` increments in the transaction that records a frame result.
"""

from __future__ import annotations

import uuid
from decimal import Decimal

from django.conf import settings
from django.db import models
from django.utils import timezone

from assets.models import Asset, ObjectClass


class Campaign(models.Model):
    class Status(models.TextChoices):
        DRAFT = "draft", "Draft"
        RUNNING = "running", "Running"
        PAUSED = "paused", "Paused"
        COMPLETED = "completed", "Completed"
        CANCELLED = "cancelled", "Cancelled"

    class PauseReason(models.TextChoices):
        NONE = "", "—"
        USER = "user", "Paused by a user"
        BUDGET = "budget", "The next frame would take spend over the cost budget"
        FAILURES = "failures", "Too many frames failed"

    name = models.CharField(max_length=200)
    team = models.ForeignKey("teams.Team", on_delete=models.PROTECT, related_name="campaigns")
    uid = models.UUIDField(
        default=uuid.uuid4,
        unique=True,
        editable=False,
        help_text="Carried by every task message: a worker whose database does not hold this "
        "campaign (a misconfigured fleet) refuses the message instead of rendering "
        "another frame with the same id",
    )
    owner = models.ForeignKey(settings.AUTH_USER_MODEL, on_delete=models.PROTECT, related_name="campaigns")
    description = models.TextField(blank=True)
    status = models.CharField(max_length=16, choices=Status.choices, default=Status.DRAFT, db_index=True)
    pause_reason = models.CharField(max_length=16, choices=PauseReason.choices, blank=True, default="")
    pause_detail = models.CharField(max_length=500, blank=True)
    seed = models.BigIntegerField(default=0, help_text="Root seed; every frame's seed derives from it")
    budget = models.JSONField(help_text="Randomization budget, normalized by render.budget.normalize_budget")
    assets = models.ManyToManyField(Asset, blank=True, related_name="campaigns")
    cost_budget = models.DecimalField(max_digits=14, decimal_places=2, help_text="Most the campaign may spend")
    price_per_cpu_hour = models.DecimalField(max_digits=10, decimal_places=4)
    setup_cost = models.DecimalField(max_digits=12, decimal_places=2, default=Decimal("0"))
    manual_labelling_rate_per_hour = models.DecimalField(max_digits=10, decimal_places=2, default=Decimal("0"))
    weight = models.PositiveIntegerField(default=1, help_text="Share of the fleet relative to other campaigns")
    max_attempts = models.PositiveSmallIntegerField(default=3, help_text="Attempts per frame before it is dead")

    # Counters: changed only by F() increments in campaigns.services.
    frames_done = models.PositiveIntegerField(default=0)
    frames_dead = models.PositiveIntegerField(default=0)
    instances_accepted = models.PositiveIntegerField(default=0)
    instances_rejected = models.PositiveIntegerField(default=0)
    cpu_s_spent = models.FloatField(default=0.0)
    wall_s_spent = models.FloatField(default=0.0)
    compute_cost_spent = models.DecimalField(max_digits=16, decimal_places=6, default=Decimal("0"))

    created_at = models.DateTimeField(default=timezone.now)
    started_at = models.DateTimeField(null=True, blank=True)
    finished_at = models.DateTimeField(null=True, blank=True)

    # Notifications (campaigns.notify): where to send them and when the failure alert last went out.
    notify_url = models.CharField(max_length=500, blank=True, help_text="Webhook URL (http or https); empty: none")
    notify_secret = models.CharField(max_length=64, blank=True, help_text="HMAC-SHA256 key of the webhook's signature")
    notify_emails = models.CharField(max_length=1000, blank=True, help_text="E-mail addresses, space separated")
    notify_failure_rate = models.FloatField(
        default=0.2,
        help_text="Alert when this share of the latest finished frames is dead (0 = no alert)",
    )
    failure_alert_at = models.DateTimeField(null=True, blank=True, help_text="When the failure alert went out")

    class Meta:
        ordering = ["-created_at"]
        constraints = [
            models.CheckConstraint(condition=models.Q(cost_budget__gte=0), name="campaign_cost_budget_non_negative"),
            models.CheckConstraint(condition=models.Q(price_per_cpu_hour__gte=0), name="campaign_price_non_negative"),
            models.CheckConstraint(condition=models.Q(setup_cost__gte=0), name="campaign_setup_cost_non_negative"),
            models.CheckConstraint(condition=models.Q(weight__gte=1), name="campaign_weight_positive"),
            models.CheckConstraint(
                condition=models.Q(notify_failure_rate__gte=0) & models.Q(notify_failure_rate__lte=1),
                name="campaign_notify_failure_rate_0_1",
            ),
            models.UniqueConstraint(fields=["team", "name"], name="campaign_unique_name_per_team"),
        ]

    def __str__(self) -> str:
        return self.name

    @property
    def width_px(self) -> int:
        return int(self.budget["render"]["width_px"])

    @property
    def height_px(self) -> int:
        return int(self.budget["render"]["height_px"])

    @property
    def spp(self) -> int:
        return int(self.budget["render"]["spp"])


class ClassQuota(models.Model):
    """Target of accepted instances for one class in one campaign, with its acceptance rule and counters."""

    campaign = models.ForeignKey(Campaign, on_delete=models.CASCADE, related_name="quotas")
    object_class = models.ForeignKey(ObjectClass, on_delete=models.PROTECT, related_name="quotas")
    target_accepted = models.PositiveIntegerField()
    min_visible_fraction = models.FloatField(default=0.25)
    min_box_px = models.FloatField(default=16.0)
    min_contrast = models.FloatField(
        default=2.0,
        help_text="Least contrast (ΔE*ab between the object and its surroundings ÷ the image's noise, "
        "at least 1 ΔE) an accepted instance shows in the final image; 0 = not judged",
    )

    # Counters: changed only by F() increments in campaigns.services.
    placed_count = models.PositiveIntegerField(default=0, help_text="Instances requested in finished frames")
    accepted_count = models.PositiveIntegerField(default=0)
    rejected_count = models.PositiveIntegerField(default=0)
    met_at = models.DateTimeField(null=True, blank=True, help_text="When accepted_count first reached the target")

    class Meta:
        ordering = ["campaign", "object_class__name"]
        constraints = [
            models.UniqueConstraint(fields=["campaign", "object_class"], name="quota_unique_class_per_campaign"),
            models.CheckConstraint(
                condition=models.Q(min_visible_fraction__gte=0) & models.Q(min_visible_fraction__lte=1),
                name="quota_min_visible_fraction_0_1",
            ),
            models.CheckConstraint(condition=models.Q(min_box_px__gte=0), name="quota_min_box_px_non_negative"),
            models.CheckConstraint(condition=models.Q(min_contrast__gte=0), name="quota_min_contrast_non_negative"),
        ]

    def __str__(self) -> str:
        return f"{self.campaign_id}:{self.object_class_id} {self.accepted_count}/{self.target_accepted}"


class Frame(models.Model):
    """One render task; (campaign, index) is its idempotency key."""

    class State(models.TextChoices):
        QUEUED = "queued", "Queued"
        RUNNING = "running", "Running"
        DONE = "done", "Done"
        FAILED = "failed", "Failed (will retry)"
        DEAD = "dead", "Dead"
        REVOKED = "revoked", "Revoked (campaign paused or cancelled)"

    campaign = models.ForeignKey(Campaign, on_delete=models.CASCADE, related_name="frames")
    index = models.PositiveIntegerField()
    seed = models.BigIntegerField()
    layout_index = models.PositiveIntegerField()
    lighting_index = models.PositiveIntegerField()
    view_index = models.PositiveIntegerField()
    composition = models.JSONField(help_text="Class name → number of instances requested")
    state = models.CharField(max_length=16, choices=State.choices, default=State.QUEUED, db_index=True)
    attempts = models.PositiveSmallIntegerField(default=0)
    dispatch_count = models.PositiveSmallIntegerField(default=0, help_text="Messages sent for this frame")
    task_id = models.CharField(max_length=200, blank=True)
    worker_host = models.CharField(max_length=255, blank=True)
    expected_cpu_s = models.FloatField(default=0.0, help_text="Estimate used by the budget check at dispatch")
    cpu_s = models.FloatField(null=True, blank=True)
    wall_s = models.FloatField(null=True, blank=True)
    compute_cost = models.DecimalField(max_digits=14, decimal_places=6, null=True, blank=True)
    timings_s = models.JSONField(default=dict, blank=True)
    output_dir = models.CharField(max_length=500, blank=True, help_text="Relative to MEDIA_ROOT")
    error = models.TextField(blank=True)
    traceback = models.TextField(blank=True)
    retry_at = models.DateTimeField(null=True, blank=True)
    created_at = models.DateTimeField(default=timezone.now)
    queued_at = models.DateTimeField(null=True, blank=True)
    started_at = models.DateTimeField(null=True, blank=True)
    finished_at = models.DateTimeField(null=True, blank=True)
    # Curation: a done frame a user left out of exports, and why (it still counts for quotas and spend).
    excluded_at = models.DateTimeField(null=True, blank=True, help_text="When the frame was left out of exports")
    excluded_reason = models.CharField(max_length=500, blank=True, help_text="Why it is left out of exports")

    IN_FLIGHT_STATES = (State.QUEUED, State.RUNNING, State.FAILED)

    class Meta:
        ordering = ["campaign", "index"]
        constraints = [models.UniqueConstraint(fields=["campaign", "index"], name="frame_unique_index_per_campaign")]
        indexes = [models.Index(fields=["campaign", "state"], name="frame_campaign_state")]

    def __str__(self) -> str:
        return f"campaign {self.campaign_id} frame {self.index} ({self.state})"


class FrameEvent(models.Model):
    """Every state change of a frame or campaign, append-only (the audit trail the scheduler keeps)."""

    campaign = models.ForeignKey(Campaign, on_delete=models.CASCADE, related_name="events")
    frame = models.ForeignKey(Frame, on_delete=models.CASCADE, related_name="events", null=True, blank=True)
    from_state = models.CharField(max_length=16, blank=True)
    to_state = models.CharField(max_length=16)
    worker_host = models.CharField(max_length=255, blank=True)
    detail = models.TextField(blank=True)
    created_at = models.DateTimeField(default=timezone.now, db_index=True)

    class Meta:
        ordering = ["created_at", "id"]

    def __str__(self) -> str:
        what = f"frame {self.frame_id}" if self.frame_id else "campaign"
        return f"{what}: {self.from_state or '∅'} → {self.to_state}"


class Instance(models.Model):
    """One labelled object in a done frame (the render core's label row)."""

    frame = models.ForeignKey(Frame, on_delete=models.CASCADE, related_name="instances")
    campaign = models.ForeignKey(Campaign, on_delete=models.CASCADE, related_name="instances")
    object_class = models.ForeignKey(ObjectClass, on_delete=models.PROTECT, related_name="instances")
    instance_id = models.PositiveIntegerField(help_text="Id in the frame's instance mask")
    asset_id = models.CharField(max_length=200, blank=True)
    bbox_xywh_px = models.JSONField(null=True, blank=True, help_text="COCO [x, y, w, h] of the visible pixels")
    amodal_bbox_xywh_px = models.JSONField(
        null=True, blank=True, help_text="[x, y, w, h] of the whole projection, not clipped"
    )
    visible_fraction = models.FloatField()
    contrast = models.FloatField(
        null=True,
        blank=True,
        help_text="ΔE*ab against the surrounding ring ÷ image noise (render core); "
        "empty for frames rendered before the measure existed",
    )
    occlusion_fraction = models.FloatField(default=0.0)
    truncation_fraction = models.FloatField(default=0.0)
    mask_area_px = models.PositiveIntegerField(default=0)
    segmentation_rle = models.JSONField(null=True, blank=True)
    accepted = models.BooleanField()
    reject_reasons = models.JSONField(default=list, blank=True)

    class Meta:
        ordering = ["frame", "instance_id"]
        constraints = [models.UniqueConstraint(fields=["frame", "instance_id"], name="instance_unique_per_frame")]
        indexes = [models.Index(fields=["campaign", "object_class", "accepted"], name="instance_campaign_class")]

    def __str__(self) -> str:
        return f"frame {self.frame_id} instance {self.instance_id} ({self.object_class_id})"


class Notification(models.Model):
    """One notification to one channel (a webhook or the campaign's e-mail list), with its delivery attempts.

    The payload is taken when the event happens; every attempt sends the same payload and delivery id."""

    class Channel(models.TextChoices):
        WEBHOOK = "webhook", "Webhook"
        EMAIL = "email", "E-mail"

    class State(models.TextChoices):
        PENDING = "pending", "Pending"
        SENT = "sent", "Sent"
        FAILED = "failed", "Failed"

    campaign = models.ForeignKey(Campaign, on_delete=models.CASCADE, related_name="notifications")
    delivery_id = models.UUIDField(default=uuid.uuid4, unique=True, editable=False)
    event = models.CharField(max_length=40)
    channel = models.CharField(max_length=8, choices=Channel.choices)
    target = models.CharField(max_length=1000, help_text="The URL or the addresses, as they were at the event")
    payload = models.JSONField()
    state = models.CharField(max_length=8, choices=State.choices, default=State.PENDING, db_index=True)
    attempts = models.PositiveSmallIntegerField(default=0)
    next_attempt_at = models.DateTimeField(null=True, blank=True)
    last_status_code = models.PositiveSmallIntegerField(null=True, blank=True)
    last_error = models.CharField(max_length=300, blank=True)
    created_at = models.DateTimeField(default=timezone.now)
    sent_at = models.DateTimeField(null=True, blank=True)

    class Meta:
        ordering = ["-created_at", "-pk"]
        indexes = [models.Index(fields=["state", "next_attempt_at"], name="notification_due")]

    def __str__(self) -> str:
        return f"{self.event} → {self.channel} ({self.state})"
