"""The asset library: object classes (what a detector learns) and assets (what can be placed in a scene).

Models hold data and constraints only; every write goes through :mod:`assets.services`. The tables keep the names
they had when these models lived in the campaigns app (``campaigns_objectclass``, ``campaigns_asset``), so
databases made before the move keep working; migration ``assets.0001`` took them over without touching the data.
"""

from __future__ import annotations

from decimal import Decimal

from django.core.validators import MinValueValidator
from django.db import models
from django.utils import timezone


class ObjectClass(models.Model):
    """A kind of object the detector must learn (the render core's asset class name)."""

    name = models.SlugField(max_length=64, unique=True, help_text="Render core class name, e.g. wall_clock")
    label = models.CharField(max_length=128, blank=True, help_text="Human-readable name")
    description = models.TextField(blank=True)

    class Meta:
        # The table keeps the name it had when object classes lived in the campaigns app.
        db_table = "campaigns_objectclass"
        ordering = ["name"]
        verbose_name_plural = "object classes"

    def __str__(self) -> str:
        return self.name


class Asset(models.Model):
    """Something that can be placed in a scene: a procedural generator or an uploaded mesh."""

    class Kind(models.TextChoices):
        PROCEDURAL = "procedural", "Procedural generator"
        MESH = "mesh", "Uploaded mesh"

    object_class = models.ForeignKey(ObjectClass, on_delete=models.PROTECT, related_name="assets")
    name = models.CharField(max_length=128)
    kind = models.CharField(max_length=16, choices=Kind.choices, default=Kind.PROCEDURAL)
    generator = models.CharField(max_length=128, blank=True, help_text="Render core generator (class name)")
    mesh_file = models.FileField(upload_to="assets/meshes/", blank=True)
    mesh_unit = models.CharField(max_length=8, default="auto", help_text="m, cm, mm, in or auto")
    up_axis = models.CharField(
        max_length=2, default="+z", help_text="File axis pointing up: +z, +y (glTF), or any of ±x, ±y, ±z"
    )
    front = models.CharField(
        max_length=2,
        blank=True,
        default="",
        help_text="File axis the model's front faces (at right angles to the up axis); empty: "
        "+y for a z-up file, +z for a y-up file",
    )
    look = models.CharField(
        max_length=16,
        choices=[("keep", "Keep the model's look"), ("randomize", "Randomize its colours")],
        default="randomize",
        help_text="Render with the file's materials and textures, or with random colours",
    )
    team = models.ForeignKey(
        "teams.Team",
        on_delete=models.PROTECT,
        related_name="assets",
        null=True,
        blank=True,
        help_text="Owning team; empty for the shared procedural library",
    )
    creation_cost = models.DecimalField(
        max_digits=12,
        decimal_places=2,
        default=Decimal("0"),
        validators=[MinValueValidator(Decimal("0"))],
        help_text="One-off cost of making the asset (modelling, licensing), in the campaign currency",
    )
    created_at = models.DateTimeField(default=timezone.now)

    class Meta:
        db_table = "campaigns_asset"
        ordering = ["object_class__name", "name"]
        # Names are unique per team and class, so one team's names never block or reveal another's; the shared
        # library (no team) is its own namespace. Two constraints because NULLs never collide in a unique index.
        # A team upload may not take a shared asset's name either (assets.services checks that, with a message
        # that names only the shared library).
        constraints = [
            models.UniqueConstraint(
                fields=["team", "object_class", "name"],
                condition=models.Q(team__isnull=False),
                name="asset_unique_name_per_team_and_class",
            ),
            models.UniqueConstraint(
                fields=["object_class", "name"],
                condition=models.Q(team__isnull=True),
                name="asset_unique_shared_name_per_class",
            ),
            models.CheckConstraint(condition=models.Q(creation_cost__gte=0), name="asset_creation_cost_non_negative"),
        ]

    def __str__(self) -> str:
        return f"{self.object_class.name}/{self.name}"
