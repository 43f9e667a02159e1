from __future__ import annotations

from django.conf import settings
from django.db import models


class Team(models.Model):
    """Campaigns, uploaded assets and exports belong to a team; members see only their teams' work."""

    name = models.CharField(max_length=120, unique=True)
    created_at = models.DateTimeField(auto_now_add=True)
    # Set only on the team ``teams.permissions.personal_team`` made for this user. A personal team is found by this
    # key, never by its name: names are free text, and a team another user owns may carry "<name> (personal)".
    # Not editable, so no form can hand a team to another user; it outlives its user as an ordinary team.
    personal_owner = models.OneToOneField(
        settings.AUTH_USER_MODEL,
        on_delete=models.SET_NULL,
        null=True,
        blank=True,
        editable=False,
        related_name="personal_team",
    )

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
