"""Bearer-token authentication for the API (``Authorization: Bearer ef_…``)."""

from __future__ import annotations

from typing import Any

from django.http import HttpRequest
from ninja.security import HttpBearer

from api import services


class TokenAuth(HttpBearer):
    """A personal API token (made on the profile page); sets ``request.user`` to its owner.

    A missing, unknown or revoked token, or one of an inactive user, answers 401 (the API's handler for
    ``AuthenticationError``).
    """

    def __call__(self, request: HttpRequest) -> Any | None:
        # ninja's own __call__ logs the whole header in DEBUG when the scheme is not "Bearer": never log a token.
        scheme, _, token = request.headers.get(self.header, "").partition(" ")
        if scheme.lower() != self.openapi_scheme or not token.strip():
            return None
        return self.authenticate(request, token.strip())

    def authenticate(self, request: HttpRequest, token: str) -> Any | None:
        user = services.user_for_token(token)
        if user is None:
            return None
        request.user = user
        return user
