"""Who may do what: every view, download, command and admin list goes through these functions.

Roles are ordered: viewer (read) < planner (create, edit, start, pause) < admin (members, delete).
Outsiders get 404, not 403, so that the existence of another team's campaign is not revealed.
"""

from __future__ import annotations

from typing import Any

from django.core.exceptions import PermissionDenied
from django.db.models import Q, QuerySet
from django.http import Http404

from teams.models import Membership, Team

VIEWER, PLANNER, ADMIN = Membership.Role.VIEWER, Membership.Role.PLANNER, Membership.Role.ADMIN
ROLE_RANK = {VIEWER: 1, PLANNER: 2, ADMIN: 3}


def _rank(role: str) -> int:
    if role not in ROLE_RANK:
        raise ValueError(f"unknown role {role!r} (known: {', '.join(ROLE_RANK)})")
    return ROLE_RANK[role]


def role_in_team(*, user: Any, team: Team | int | None) -> str | None:
    """The user's role in a team; superusers act as admin everywhere."""
    if user is None or not getattr(user, "is_authenticated", False) or team is None:
        return None
    if user.is_superuser:
        return ADMIN
    team_id = team.pk if isinstance(team, Team) else team
    return Membership.objects.filter(team_id=team_id, user=user).values_list("role", flat=True).first()


def has_role(*, user: Any, team: Team | int | None, role: str = VIEWER) -> bool:
    have = role_in_team(user=user, team=team)
    return have is not None and ROLE_RANK[have] >= _rank(role)


def teams_for(*, user: Any, role: str = VIEWER) -> QuerySet[Team]:
    """Teams where the user holds at least ``role``."""
    if user is None or not getattr(user, "is_authenticated", False):
        return Team.objects.none()
    if user.is_superuser:
        return Team.objects.all()
    roles = [r for r, rank in ROLE_RANK.items() if rank >= _rank(role)]
    return Team.objects.filter(memberships__user=user, memberships__role__in=roles).distinct()


def scope_to_user(queryset: QuerySet, *, user: Any, team_field: str = "team", role: str = VIEWER,
                  include_shared: bool = False) -> QuerySet:
    """Restrict any queryset of team-owned rows to the user's teams.

    ``include_shared`` also keeps rows that belong to no team (the shared procedural asset library).
    """
    if getattr(user, "is_superuser", False):
        return queryset
    mine = Q(**{f"{team_field}__in": teams_for(user=user, role=role)})
    if include_shared:
        mine |= Q(**{f"{team_field}__isnull": True})
    return queryset.filter(mine)


def get_for_user_or_404(queryset: QuerySet, *, user: Any, role: str = VIEWER, team_field: str = "team",
                        **lookup: Any) -> Any:
    """Fetch one team-owned row: 404 if it is not in the user's teams, 403 if the role is too low."""
    try:
        obj = scope_to_user(queryset, user=user, team_field=team_field).get(**lookup)
    except (queryset.model.DoesNotExist, queryset.model.MultipleObjectsReturned, ValueError, TypeError) as exc:
        raise Http404("not found") from exc
    team_id = queryset.model.objects.filter(pk=obj.pk).values_list(team_field, flat=True).first()
    if not has_role(user=user, team=team_id, role=role):
        raise PermissionDenied(f"this needs the {role} role in the team")
    return obj


def personal_team(*, user: Any) -> Team:
    """The team a user's work goes to when they name none: their only planner team, else a personal one."""
    planner_teams = list(teams_for(user=user, role=PLANNER)[:2])
    if len(planner_teams) == 1:
        return planner_teams[0]
    team, _ = Team.objects.get_or_create(name=f"{user.get_username()} (personal)")
    Membership.objects.get_or_create(team=team, user=user, defaults={"role": ADMIN})
    return team
