"""Notifications leaving Evenframe (pure: no models): the webhook body, its signature, the HTTP post, e-mail text.

A webhook delivery is one HTTP ``POST`` of a JSON body with these headers:

- ``X-Evenframe-Event``: the event (:data:`EVENTS`);
- ``X-Evenframe-Delivery``: the delivery's id, the same on every retry of it (a receiver drops repeats by it);
- ``X-Evenframe-Timestamp``: Unix seconds when this attempt was signed;
- ``X-Evenframe-Signature``: ``sha256=`` and the hex HMAC-SHA256 (RFC 2104; FIPS 180-4) of
  ``"<timestamp>.<body>"`` under the campaign's notification secret. A receiver recomputes it over the raw body
  it received, compares in constant time (``hmac.compare_digest``) and refuses stale timestamps (a replay guard;
  five minutes is common practice).

Anything but a 2xx answer is a failed attempt; attempts are retried with exponential backoff (:func:`retry_delay_s`)
up to :data:`MAX_ATTEMPTS`. Redirects are not followed (a signed body is meant for the address that was set).
"""

from __future__ import annotations

import hashlib
import hmac
import ipaddress
import json
import socket
import time
import urllib.error
import urllib.request
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any
from urllib.parse import urlsplit

from django.core.exceptions import ValidationError
from django.core.validators import validate_email

EVENTS: dict[str, str] = {
    "campaign.completed": "every quota is met",
    "campaign.paused_budget": "paused: the next frame would take spend over the cost budget",
    "campaign.paused_failures": "paused: too many frames failed",
    "campaign.failure_rate": "the share of failed frames rose above the campaign's alert threshold",
    "test": "a test notification sent from the campaign page",
}
SIGNATURE_HEADER = "X-Evenframe-Signature"
MAX_ATTEMPTS = 8
RETRY_BASE_S = 30.0
RETRY_MAX_S = 3600.0
TIMEOUT_S = 10.0
MAX_URL_LENGTH = 500
ERROR_TEXT_LIMIT = 300


class NotifyError(ValueError):
    """A webhook address or an e-mail list that cannot be used; the message says why."""


def body_bytes(payload: Mapping[str, Any]) -> bytes:
    """The exact bytes sent (and signed): compact JSON with sorted keys, UTF-8."""
    return json.dumps(payload, sort_keys=True, separators=(",", ":"), ensure_ascii=False).encode("utf-8")


def signature(*, secret: str, timestamp: int, body: bytes) -> str:
    """``sha256=<hex>``: HMAC-SHA256 of ``b"<timestamp>." + body`` keyed with the secret (UTF-8)."""
    message = str(int(timestamp)).encode("ascii") + b"." + body
    return "sha256=" + hmac.new(secret.encode("utf-8"), message, hashlib.sha256).hexdigest()


def verify(*, secret: str, timestamp: str, body: bytes, header: str, now: float, tolerance_s: float = 300) -> bool:
    """What a receiver does (and the tests check): the signature matches and the timestamp is recent."""
    try:
        sent = int(timestamp)
    except (TypeError, ValueError):
        return False
    if abs(now - sent) > tolerance_s:
        return False
    return hmac.compare_digest(signature(secret=secret, timestamp=sent, body=body), header or "")


def retry_delay_s(attempts: int) -> float:
    """Wait after ``attempts`` failed attempts: 30 s, 60 s, 2 min … capped at an hour."""
    return min(RETRY_MAX_S, RETRY_BASE_S * 2 ** max(0, attempts - 1))


def clean_webhook_url(url: Any) -> str:
    """An http(s) URL with a host, at most :data:`MAX_URL_LENGTH` characters, or "" (no webhook)."""
    if url is None:
        return ""
    if not isinstance(url, str):
        raise NotifyError(f"expected a URL as text, got {type(url).__name__}")
    url = url.strip()
    if not url:
        return ""
    if len(url) > MAX_URL_LENGTH:
        raise NotifyError(f"at most {MAX_URL_LENGTH} characters, got {len(url)}")
    if any(ord(c) < 33 or ord(c) == 127 for c in url):
        raise NotifyError("a URL holds no spaces or control characters")
    try:
        parts = urlsplit(url)
        parts.port  # noqa: B018 - raises ValueError on a bad port
    except ValueError as exc:
        raise NotifyError(f"not a URL: {exc}") from exc
    if parts.scheme not in ("http", "https"):
        raise NotifyError("must start with http:// or https://")
    if not parts.hostname:
        raise NotifyError("the URL names no host")
    if parts.username or parts.password:
        raise NotifyError("no user name or password in the URL; the signature authenticates the sender")
    return url


def clean_emails(text: Any, *, limit: int = 10) -> list[str]:
    """Addresses separated by commas, spaces or new lines; each checked by Django's e-mail validator."""
    if text is None:
        return []
    if not isinstance(text, str):
        raise NotifyError(f"expected addresses as text, got {type(text).__name__}")
    addresses = [a for a in text.replace(",", " ").split() if a]
    if len(addresses) > limit:
        raise NotifyError(f"at most {limit} addresses, got {len(addresses)}")
    for address in addresses:
        try:
            validate_email(address)
        except ValidationError as exc:
            raise NotifyError(f"{address!r} is not an e-mail address") from exc
    return list(dict.fromkeys(addresses))


def private_target(url: str) -> str | None:
    """Why the URL's host resolves to an address inside this network (loopback, private, link-local, reserved),
    or None. Used when ``EVENFRAME_WEBHOOK_BLOCK_PRIVATE`` is on, so a planner cannot make the workers call the
    fleet's own services."""
    host = urlsplit(url).hostname or ""
    try:
        infos = socket.getaddrinfo(host, None)
    except OSError as exc:
        return f"cannot resolve {host!r}: {exc}"
    for info in infos:
        address = ipaddress.ip_address(info[4][0])
        if address.is_loopback or address.is_private or address.is_link_local or address.is_reserved:
            return f"{host!r} resolves to {address}, an address inside this network"
    return None


@dataclass(frozen=True)
class Attempt:
    ok: bool
    status_code: int | None
    error: str


class _NoRedirect(urllib.request.HTTPRedirectHandler):
    def redirect_request(self, *args: Any, **kwargs: Any) -> None:
        return None  # a 3xx answer is returned as an error, not followed


def post_webhook(
    *, url: str, event: str, delivery_id: str, secret: str, payload: Mapping[str, Any], timeout_s: float = TIMEOUT_S
) -> Attempt:
    """One signed POST; never raises for network or HTTP errors (they are the attempt's result)."""
    body = body_bytes(payload)
    timestamp = int(time.time())
    request = urllib.request.Request(
        url,
        data=body,
        method="POST",
        headers={
            "Content-Type": "application/json; charset=utf-8",
            "User-Agent": "Evenframe-Notifications/1",
            "X-Evenframe-Event": event,
            "X-Evenframe-Delivery": delivery_id,
            "X-Evenframe-Timestamp": str(timestamp),
            SIGNATURE_HEADER: signature(secret=secret, timestamp=timestamp, body=body),
        },
    )
    opener = urllib.request.build_opener(_NoRedirect)
    try:
        with opener.open(request, timeout=timeout_s) as response:
            code = int(response.status)
    except urllib.error.HTTPError as exc:
        return Attempt(False, int(exc.code), f"HTTP {exc.code} {exc.reason}"[:ERROR_TEXT_LIMIT])
    except (urllib.error.URLError, OSError, ValueError) as exc:
        reason = getattr(exc, "reason", exc)
        return Attempt(False, None, f"{type(exc).__name__}: {reason}"[:ERROR_TEXT_LIMIT])
    if 200 <= code < 300:
        return Attempt(True, code, "")
    return Attempt(False, code, f"HTTP {code}")


def email_text(payload: Mapping[str, Any]) -> tuple[str, str]:
    """Subject and plain-text body of an e-mail for a notification payload."""
    campaign = payload["campaign"]
    event = str(payload["event"])
    what = EVENTS.get(event, event)
    subject = f"[Evenframe] {campaign['name']}: {what}"
    lines = [
        f"Campaign “{campaign['name']}” (team {campaign['team']}): {what}.",
        "",
        f"Status: {campaign['status']}",
    ]
    if payload.get("detail"):
        lines.append(f"Detail: {payload['detail']}")
    lines += [
        f"Frames done: {campaign['frames_done']}, dead: {campaign['frames_dead']}",
        f"Accepted instances: {campaign['instances_accepted']}",
        f"Spent: {campaign['currency']} {campaign['spent']} of {campaign['currency']} {campaign['cost_budget']}",
        "",
        "Quotas (accepted / target):",
    ]
    lines += [f"  {q['class_name']}: {q['accepted']} / {q['target']}" for q in payload.get("quotas", [])]
    if campaign.get("url"):
        lines += ["", campaign["url"]]
    return subject[:200], "\n".join(lines) + "\n"
