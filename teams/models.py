from __future__ import annotations

from django.conf import settings
from django.db import models


class Team(models.Model):
    """Campaigns, uploaded assets and exports belong to a team; members see only their teams' work."""

    name = models.CharField(max_length=120, unique=True)
    created_at = models.DateTimeField(auto_now_add=True)

    class Meta:
        ordering = ["name"]

    def __str__(self) -> str:
        return self.name


class Membership(models.Model):
    class Role(models.TextChoices):
        VIEWER = "viewer", "Viewer (read)"
        PLANNER = "planner", "Planner (create, edit, start, pause)"
        ADMIN = "admin", "Admin (members, delete)"

    team = models.ForeignKey(Team, on_delete=models.CASCADE, related_name="memberships")
    user = models.ForeignKey(settings.AUTH_USER_MODEL, on_delete=models.CASCADE, related_name="memberships")
    role = models.CharField(max_length=16, choices=Role.choices, default=Role.VIEWER)

    class Meta:
        constraints = [models.UniqueConstraint(fields=["team", "user"], name="one_membership_per_team_and_user")]
        ordering = ["team__name", "user__username"]

    def __str__(self) -> str:
        return f"{self.user} in {self.team} ({self.role})"
