"""Per-user API tokens. Only the SHA-256 of a token is stored; the token itself is shown once, when it is made."""

from __future__ import annotations

from django.conf import settings
from django.db import models
from django.utils import timezone

NAME_MAX_CHARS = 100


class ApiToken(models.Model):
    user = models.ForeignKey(settings.AUTH_USER_MODEL, on_delete=models.CASCADE, related_name="api_tokens")
    name = models.CharField(max_length=NAME_MAX_CHARS, help_text="What the token is for, e.g. the script that uses it")
    prefix = models.CharField(max_length=8, help_text="The token's first characters, to tell tokens apart")
    key_hash = models.CharField(max_length=64, unique=True, help_text="SHA-256 (hex) of the whole token")
    created_at = models.DateTimeField(default=timezone.now)
    last_used_at = models.DateTimeField(null=True, blank=True)
    revoked_at = models.DateTimeField(null=True, blank=True)

    class Meta:
        ordering = ["-created_at", "-pk"]

    def __str__(self) -> str:
        return f"{self.name} ({self.prefix}…)"

    @property
    def active(self) -> bool:
        return self.revoked_at is None
