"""Writes for API tokens: create, revoke, and the authentication that stamps ``last_used_at``.

A token is ``ef_`` followed by ``secrets.token_urlsafe(32)`` (256 random bits). Only its SHA-256 is stored, so a
database dump lets nobody use the API; a lookup by hash needs no constant-time comparison (the secret is never
compared in Python, only its hash through a unique index).
"""

from __future__ import annotations

import hashlib
import secrets
from datetime import timedelta
from typing import Any

from django.db import transaction
from django.db.models import Q
from django.utils import timezone

from api.models import NAME_MAX_CHARS, ApiToken
from evenframe.inputs import InputError, clean_text

TOKEN_PREFIX = "ef_"
PREFIX_CHARS = 8  # shown to the user beside the name: "ef_" and five random characters
# last_used_at is written at most this often per token, so a busy script does not write on every call.
LAST_USED_RESOLUTION = timedelta(minutes=1)


class ApiTokenError(InputError):
    """Bad input for a token (``field`` names the input); nothing was changed."""


def hash_token(plaintext: str) -> str:
    """SHA-256 hex of a presented token."""
    return hashlib.sha256(plaintext.encode("utf-8")).hexdigest()


@transaction.atomic
def create_token(*, user: Any, name: Any) -> tuple[ApiToken, str]:
    """A new token for ``user``: (its row, the plaintext). The plaintext is not kept anywhere; show it once."""
    clean = clean_text(name, "name", max_length=NAME_MAX_CHARS, error=ApiTokenError)
    plaintext = TOKEN_PREFIX + secrets.token_urlsafe(32)
    token = ApiToken.objects.create(
        user=user, name=clean, prefix=plaintext[:PREFIX_CHARS], key_hash=hash_token(plaintext)
    )
    return token, plaintext


def revoke_token(*, user: Any, token_id: int) -> bool:
    """Revoke one of ``user``'s own tokens; False when it is not theirs or was revoked already."""
    changed = ApiToken.objects.filter(pk=token_id, user=user, revoked_at__isnull=True).update(revoked_at=timezone.now())
    return changed == 1


def user_for_token(plaintext: str) -> Any | None:
    """The active user a presented token belongs to, or None (unknown, revoked, or the user is inactive).

    Stamps ``last_used_at`` when it is unset or older than :data:`LAST_USED_RESOLUTION` (one conditional update).
    """
    if not plaintext or not plaintext.startswith(TOKEN_PREFIX) or len(plaintext) > 200:
        return None
    token = (
        ApiToken.objects.select_related("user").filter(key_hash=hash_token(plaintext), revoked_at__isnull=True).first()
    )
    if token is None or not token.user.is_active:
        return None
    now = timezone.now()
    if token.last_used_at is None or now - token.last_used_at >= LAST_USED_RESOLUTION:
        ApiToken.objects.filter(pk=token.pk).filter(
            Q(last_used_at__isnull=True) | Q(last_used_at__lte=now - LAST_USED_RESOLUTION)
        ).update(last_used_at=now)
    return token.user


def tokens_of(*, user: Any) -> list[ApiToken]:
    """The user's tokens, newest first (a read, kept beside the writes: the app is this small)."""
    return list(ApiToken.objects.filter(user=user).order_by("-created_at", "-pk"))
