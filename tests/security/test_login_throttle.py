"""Sign-in throttling: N failed sign-ins in a row lock the user name out from that address for the cool-off, even
with the right password, with a clear 429 page; the settings come from environment variables."""

from __future__ import annotations

import os
import subprocess
import sys
from datetime import timedelta
from pathlib import Path

import pytest
from django.db.models import F
from django.http import HttpRequest
from django.test import Client, RequestFactory
from django.urls import reverse

pytestmark = pytest.mark.django_db

PASSWORD = "right-password-123"
ROOT = Path(__file__).resolve().parents[2]


LIMIT = 3
COOLOFF = timedelta(minutes=10)


@pytest.fixture(autouse=True)
def throttle(settings):
    """A limit and cool-off other than the defaults, to see that the configured values are the ones used."""
    settings.AXES_FAILURE_LIMIT = LIMIT
    settings.AXES_COOLOFF_TIME = COOLOFF


@pytest.fixture
def people(django_user_model):
    return {
        name: django_user_model.objects.create_user(name, password=PASSWORD, is_staff=True) for name in ("pia", "ada")
    }


def _sign_in(client: Client, username: str, password: str, *, url: str | None = None):
    return client.post(url or reverse("login"), {"username": username, "password": password})


def _signed_in_as(client: Client) -> str | None:
    return client.session.get("_auth_user_id")


def _fail(client: Client, username: str, times: int) -> None:
    for attempt in range(times):
        response = _sign_in(client, username, "wrong-password")
        assert response.status_code == 200, (attempt, response.status_code)
        assert b"do not match" in response.content


def test_failed_sign_ins_lock_out_until_the_cool_off(people):
    client = Client(raise_request_exception=False)
    _fail(client, "pia", LIMIT - 1)
    locked = _sign_in(client, "pia", "wrong-password")
    assert locked.status_code == 429
    assert b"Sign-in paused" in locked.content and b"after 3 in a row" in locked.content
    assert b"Try again in 10 minutes" in locked.content
    assert locked["Retry-After"] == "600"

    # The right password is refused too, on the sign-in page and on the admin's.
    for url in (reverse("login"), reverse("admin:login")):
        refused = _sign_in(client, "pia", PASSWORD, url=url)
        assert refused.status_code == 429, url
        assert b"Sign-in paused" in refused.content
        assert _signed_in_as(client) is None
    assert client.get(reverse("campaigns:list")).status_code == 302  # still signed out
    assert client.get(reverse("login")).status_code == 200  # the page itself stays reachable

    # Another user name from the same address is not locked (lockout by user name and address).
    other = Client()
    assert _sign_in(other, "ada", PASSWORD).status_code == 302
    assert _signed_in_as(other) == str(people["ada"].pk)

    # Once the cool-off has passed since the last counted failure, the right password works again.
    from axes.models import AccessAttempt

    AccessAttempt.objects.update(attempt_time=F("attempt_time") - COOLOFF - timedelta(seconds=5))
    assert _sign_in(client, "pia", PASSWORD).status_code == 302
    assert _signed_in_as(client) == str(people["pia"].pk)


def test_attempts_during_a_lockout_do_not_extend_it(people):
    client = Client()
    _fail(client, "pia", LIMIT - 1)
    assert _sign_in(client, "pia", "wrong-password").status_code == 429
    from axes.models import AccessAttempt

    counted = AccessAttempt.objects.get()
    for _ in range(3):
        assert _sign_in(client, "pia", "wrong-password").status_code == 429
    attempt = AccessAttempt.objects.get()
    assert (attempt.attempt_time, attempt.failures_since_start) == (counted.attempt_time, counted.failures_since_start)


def test_a_successful_sign_in_resets_the_count(people):
    client = Client()
    _fail(client, "pia", LIMIT - 1)
    assert _sign_in(client, "pia", PASSWORD).status_code == 302
    client.logout()
    _fail(client, "pia", LIMIT - 1)  # would be locked out if the earlier failures still counted
    assert _sign_in(client, "pia", PASSWORD).status_code == 302


def test_lockout_answers_4xx_for_odd_clients(people):
    client = Client(raise_request_exception=False, HTTP_USER_AGENT="x" * 5000, HTTP_ACCEPT="y" * 5000)
    for _ in range(LIMIT + 1):
        response = _sign_in(client, "pia", "wrong-password")
        assert response.status_code in (200, 429)
    assert response.status_code == 429
    ajax = client.post(
        reverse("login"), {"username": "pia", "password": PASSWORD}, HTTP_X_REQUESTED_WITH="XMLHttpRequest"
    )
    assert ajax.status_code == 429
    # Not even a user name: the form refuses it before anything is counted.
    assert _sign_in(Client(raise_request_exception=False), "", "").status_code == 200
    # Sign-ins record these headers; a NUL in them is refused before it reaches the database.
    for header in ("HTTP_USER_AGENT", "HTTP_ACCEPT"):
        odd = Client(raise_request_exception=False, **{header: "a\x00b"})
        for password in ("wrong-password", PASSWORD):
            response = _sign_in(odd, "ada", password)
            assert response.status_code == 400, (header, password)
            assert b"NUL character" in response.content


def test_client_address_behind_the_proxy(settings):
    from evenframe.login_throttle import client_ip_address

    factory = RequestFactory()
    forged = factory.post("/login/", REMOTE_ADDR="10.0.0.2", HTTP_X_FORWARDED_FOR="203.0.113.9, 198.51.100.7")
    settings.BEHIND_PROXY = False
    assert client_ip_address(forged) == "10.0.0.2"
    settings.BEHIND_PROXY = True
    # The proxy appends the address it saw; what the client put before it is not trusted.
    assert client_ip_address(forged) == "198.51.100.7"
    garbage = factory.post("/login/", REMOTE_ADDR="10.0.0.2", HTTP_X_FORWARDED_FOR="1.2.3.4, not-an-address")
    assert client_ip_address(garbage) == "10.0.0.2"


def test_test_client_login_passes_a_request(people):
    from axes.exceptions import AxesBackendRequestParameterRequired

    client = Client()
    # Without a request nothing could be counted, so the backend refuses instead of letting it through.
    with pytest.raises(AxesBackendRequestParameterRequired):
        client.login(username="pia", password=PASSWORD)
    assert client.login(request=HttpRequest(), username="pia", password=PASSWORD)
    assert _signed_in_as(client) == str(people["pia"].pk)


def _settings_in_subprocess(**env: str) -> subprocess.CompletedProcess:
    code = (
        "import evenframe.settings as s; "
        "print(s.AXES_FAILURE_LIMIT, s.AXES_COOLOFF_TIME.total_seconds(), s.AXES_LOCKOUT_PARAMETERS)"
    )
    clean = {k: v for k, v in os.environ.items() if not k.startswith("EVENFRAME_LOGIN_")}
    return subprocess.run(
        [sys.executable, "-c", code], cwd=ROOT, env={**clean, **env}, capture_output=True, text=True, timeout=60
    )


def test_settings_come_from_the_environment():
    default = _settings_in_subprocess()
    assert default.returncode == 0, default.stderr
    assert default.stdout.split(maxsplit=2) == ["5", "900.0", "[['username', 'ip_address']]\n"]
    chosen = _settings_in_subprocess(
        EVENFRAME_LOGIN_FAILURE_LIMIT="3", EVENFRAME_LOGIN_COOLOFF_MINUTES="2.5", EVENFRAME_LOGIN_LOCKOUT_BY="ip"
    )
    assert chosen.returncode == 0, chosen.stderr
    assert chosen.stdout.split(maxsplit=2) == ["3", "150.0", "['ip_address']\n"]


@pytest.mark.parametrize(
    ("name", "value", "message"),
    [
        ("EVENFRAME_LOGIN_FAILURE_LIMIT", "0", "EVENFRAME_LOGIN_FAILURE_LIMIT must be at least 1"),
        ("EVENFRAME_LOGIN_FAILURE_LIMIT", "five", "EVENFRAME_LOGIN_FAILURE_LIMIT must be a whole number"),
        ("EVENFRAME_LOGIN_COOLOFF_MINUTES", "nan", "EVENFRAME_LOGIN_COOLOFF_MINUTES must be at least 0.1"),
        (
            "EVENFRAME_LOGIN_LOCKOUT_BY",
            "cookie",
            "EVENFRAME_LOGIN_LOCKOUT_BY must be one of user-and-ip, ip, user-or-ip",
        ),
    ],
)
def test_bad_settings_stop_the_start_with_a_clear_message(name, value, message):
    result = _settings_in_subprocess(**{name: value})
    assert result.returncode != 0
    assert "ImproperlyConfigured" in result.stderr and message in result.stderr
