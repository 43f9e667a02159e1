"""Who may download a campaign's dataset: one function, so teams can replace the rule."""

from __future__ import annotations

from typing import Any

from teams.permissions import VIEWER, has_role


def can_export(*, user: Any, campaign: Any) -> bool:
    """Who may download a campaign's dataset: any member of its team (reading is the viewer role)."""
    return has_role(user=user, team=campaign.team_id, role=VIEWER)
