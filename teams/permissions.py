"""Who may do what: every view, download, command and admin list goes through these functions.

Roles are ordered: viewer (read) < planner (create, edit, start, pause) < admin (members, delete).
Outsiders get 404, not 403, so that the existence of another team's campaign is not revealed.
"""

from __future__ import annotations

import functools
from typing import Any

from django.contrib.auth import get_user_model
from django.core.exceptions import PermissionDenied
from django.db import IntegrityError, transaction
from django.db.models import Model, Q, QuerySet
from django.http import Http404

from teams.models import Membership, Team

VIEWER, PLANNER, ADMIN = Membership.Role.VIEWER, Membership.Role.PLANNER, Membership.Role.ADMIN
ROLE_RANK: dict[str, int] = {
    VIEWER: 1,
    PLANNER: 2,
    ADMIN: 3,
}  # Role members are str: a role read as text finds its rank


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


def scope_to_user(
    queryset: QuerySet, *, user: Any, team_field: str = "team", role: str = VIEWER, include_shared: bool = False
) -> QuerySet:
    """Restrict any queryset of team-owned rows to the user's teams.

    ``include_shared`` also keeps rows that belong to no team (the shared procedural asset library).
    """
    if getattr(user, "is_superuser", False):
        return queryset
    mine = Q(**{f"{team_field}__in": teams_for(user=user, role=role)})
    if include_shared:
        mine |= Q(**{f"{team_field}__isnull": True})
    return queryset.filter(mine)


def get_for_user_or_404(
    queryset: QuerySet, *, user: Any, role: str = VIEWER, team_field: str = "team", **lookup: Any
) -> Any:
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
    """The team a user's work goes to when they name none: their only planner team, else a personal one.

    The personal team is the one whose ``personal_owner`` is the user, made on first use and named
    "<username> (personal)" (with a number after it if another team already has that name). It is never
    looked up by name: a team of that name may belong to other people, and taking it would make this user
    its admin.
    """
    planner_teams = list(teams_for(user=user, role=PLANNER)[:2])
    if len(planner_teams) == 1:
        return planner_teams[0]
    team = Team.objects.filter(personal_owner=user).first() or _create_personal_team(user)
    Membership.objects.get_or_create(team=team, user=user, defaults={"role": ADMIN})
    return team


# Names tried for a new personal team before giving up; each one taken means another team already has it.
_PERSONAL_NAME_ATTEMPTS = 20


def _create_personal_team(user: Any) -> Team:
    max_length = Team._meta.get_field("name").max_length
    suffix = " (personal)"
    # A user name may be longer than a team name can be: shorten the user name, keep the suffix readable.
    keep = None if max_length is None else max_length - len(suffix) - 4  # None: no limit, the whole user name
    base = f"{user.get_username()[:keep]}{suffix}"
    for attempt in range(1, _PERSONAL_NAME_ATTEMPTS + 1):
        name = base if attempt == 1 else f"{base} {attempt}"
        if Team.objects.filter(name=name).exists():
            continue
        try:
            with transaction.atomic():
                return Team.objects.create(name=name, personal_owner=user)
        except IntegrityError:
            # Either a concurrent request made this user's personal team first (use it), or another team took
            # the name in between (try the next one).
            if (team := Team.objects.filter(personal_owner=user).first()) is not None:
                return team
    raise RuntimeError(
        f"no free name for a personal team of {user.get_username()!r} after {_PERSONAL_NAME_ATTEMPTS} tries"
    )


@functools.cache
def _team_owner(model: type[Model]) -> tuple[str, bool] | None:
    """(lookup path to the owning team, whether rows may have no team) for a model, or None if no team owns it."""
    if model is Team:
        return "pk", False
    if model is get_user_model():
        return "memberships__team", False
    frontier: list[tuple[type[Model], str]] = [(model, "")]
    seen = {model}
    for _depth in range(3):
        reached: list[tuple[type[Model], str]] = []
        for current, prefix in frontier:
            for field in current._meta.get_fields():
                if not field.concrete or not (field.many_to_one or field.one_to_one):
                    continue
                target = field.related_model
                if target is None:  # a concrete to-one field always names its model
                    continue
                if target is Team:
                    # Only a model's own optional team means "shared with everyone" (the procedural asset library).
                    return f"{prefix}{field.name}", bool(field.null and not prefix)
                # An optional link owns nothing; a user belongs to many teams, so a row owned by a user is not
                # owned by any one of them.
                if field.null or target in seen or target is get_user_model():
                    continue
                seen.add(target)
                reached.append((target, f"{prefix}{field.name}__"))
        frontier = reached
    return None


def team_path(model: type[Model]) -> str | None:
    """The lookup from a model's rows to the team that owns them, or None for rows no team owns.

    ``Team`` → ``"pk"``; a model with a ``team`` foreign key → ``"team"``; otherwise the shortest chain of required
    foreign keys that ends at a team (a frame → ``"campaign__team"``). A user account belongs to the teams it is a
    member of (``"memberships__team"``). Reference data such as object classes belongs to no team.
    """
    owner = _team_owner(model)
    return owner[0] if owner else None


def scope_by_team(queryset: QuerySet, *, user: Any, role: str = VIEWER) -> QuerySet:
    """Rows of any model that ``user`` may see (``role=VIEWER``) or pick for a change (a higher role).

    Rows of teams where the user holds ``role``; plus shared rows (no team) for models whose team is optional;
    every row for models no team owns; user accounts that are members of those teams. Admin lists and every
    drop-down of the admin go through this, so a choice that is not offered is also refused when posted.
    """
    model: type[Model] = queryset.model
    owner = _team_owner(model)
    if owner is None or getattr(user, "is_superuser", False):
        return queryset
    path, shared = owner
    if queryset.model is get_user_model():
        members = Membership.objects.filter(team__in=teams_for(user=user, role=role)).values("user_id")
        return queryset.filter(pk__in=members)
    return scope_to_user(queryset, user=user, team_field=path, role=role, include_shared=shared)


def team_id_of(obj: Model) -> int | None:
    """The id of the team that owns a saved row (None for shared rows and rows no team owns)."""
    path = team_path(type(obj))
    if path is None or obj.pk is None:
        return None
    if path == "pk":
        return obj.pk
    return type(obj)._default_manager.filter(pk=obj.pk).values_list(path, flat=True).first()


def may_change_membership(*, user: Any, membership: Membership) -> bool:
    """Whether ``user`` may edit or remove this membership: its team's admins may, except their own."""
    if getattr(user, "is_superuser", False):
        return True
    return membership.user_id != user.pk and has_role(user=user, team=membership.team_id, role=ADMIN)


def membership_change_errors(
    *, user: Any, team: Team | None, member: Any, role: str, current: Membership | None = None
) -> dict[str, str]:
    """Why ``user`` may not give ``member`` the ``role`` in ``team`` (field → message); empty when allowed.

    ``current`` is the membership being changed (None for a new one). Only a team's admins manage its members;
    nobody grants a role above their own; nobody but a superuser adds or changes their own membership, so a
    planner cannot promote themselves and an admin cannot demote the team's last admin seat by accident.
    """
    if getattr(user, "is_superuser", False):
        return {}
    errors: dict[str, str] = {}
    own_role = role_in_team(user=user, team=team) if team is not None else None
    if team is None or own_role != ADMIN:
        errors["team"] = "Only the team's admins manage its members."
    elif (
        current is not None and current.team_id != team.pk and not has_role(user=user, team=current.team_id, role=ADMIN)
    ):
        errors["team"] = "Only admins of both teams may move a membership between them."
    if (member is not None and getattr(member, "pk", member) == user.pk) or (
        current is not None and current.user_id == user.pk
    ):
        errors["user"] = "You cannot add or change your own membership; another admin of the team can."
    if own_role is not None and role in ROLE_RANK and ROLE_RANK[role] > ROLE_RANK[own_role]:
        errors["role"] = f"You cannot grant a role above your own ({own_role})."
    return errors
