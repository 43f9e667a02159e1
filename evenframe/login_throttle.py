"""Sign-in throttling with django-axes: whose address a sign-in comes from, and the page a locked-out client sees.

Settings: ``EVENFRAME_LOGIN_FAILURE_LIMIT``, ``EVENFRAME_LOGIN_COOLOFF_MINUTES``, ``EVENFRAME_LOGIN_LOCKOUT_BY``
(evenframe/settings.py). Locked-out sign-ins and their counts live in the database (axes' tables, shown in the
admin to superusers), so every web server process of a deployment shares them.
"""

from __future__ import annotations

import ipaddress
import math
from collections.abc import Callable
from typing import Any

from django.conf import settings
from django.http import HttpRequest, HttpResponse, HttpResponseBadRequest
from django.shortcuts import render


def _valid_address(value: str) -> str | None:
    try:
        return str(ipaddress.ip_address(value.strip()))
    except ValueError:
        return None


def client_ip_address(request: HttpRequest) -> str | None:
    """The address a sign-in comes from.

    ``REMOTE_ADDR``; behind our reverse proxy (``EVENFRAME_BEHIND_PROXY``) the last address in
    ``X-Forwarded-For``, the one the proxy itself appended: earlier entries come from the client and can be
    forged to dodge the count. A value that is not an IP address is ignored.
    """
    if settings.BEHIND_PROXY:
        forwarded = request.META.get("HTTP_X_FORWARDED_FOR", "")
        if forwarded:
            last = _valid_address(forwarded.split(",")[-1])
            if last:
                return last
    return _valid_address(request.META.get("REMOTE_ADDR", "") or "")


def lockout_response(
    request: HttpRequest, original_response: HttpResponse | None = None, credentials: dict[str, Any] | None = None
) -> HttpResponse:
    """429 Too Many Requests with a page that says what happened and when to try again."""
    cooloff_s = settings.AXES_COOLOFF_TIME.total_seconds()
    context = {"failure_limit": settings.AXES_FAILURE_LIMIT, "cooloff_minutes": math.ceil(cooloff_s / 60)}
    response = render(request, "registration/locked_out.html", context, status=429)
    response["Retry-After"] = str(math.ceil(cooloff_s))
    return response


class RejectNulHeadersMiddleware:
    """400 for a request whose headers contain a NUL character.

    Sign-ins record the User-Agent and Accept headers, and PostgreSQL text cannot hold NUL: such a request would
    otherwise end in a server error. No real client sends one.
    """

    def __init__(self, get_response: Callable[[HttpRequest], HttpResponse]) -> None:
        self.get_response = get_response

    def __call__(self, request: HttpRequest) -> HttpResponse:
        for key, value in request.META.items():
            if key.startswith("HTTP_") and isinstance(value, str) and "\x00" in value:
                return HttpResponseBadRequest(
                    "A request header contains a NUL character.", content_type="text/plain; charset=utf-8"
                )
        return self.get_response(request)
