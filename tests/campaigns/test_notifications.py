"""Notifications: signed webhook deliveries retried with backoff against a local receiver, e-mail through Django's
mail settings, the events that send them (completed, paused by budget or failures, failure share above the alert
threshold), checks of the settings, and the sweep that resends lost deliveries."""

from __future__ import annotations

import json
import shutil
import subprocess
import threading
import time
from datetime import timedelta
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

import pytest
from django.core import mail
from django.utils import timezone

from campaigns import messaging, notify, services
from campaigns.models import Campaign, Frame, Notification
from campaigns.tasks import deliver

pytestmark = pytest.mark.django_db(transaction=True)


class Receiver:
    """A local HTTP server that answers each POST with the next status of ``answers`` (then 200) and keeps what
    it received: headers and raw body."""

    def __init__(self, answers: list[int] | None = None, location: str = "") -> None:
        self.answers = list(answers or [])
        self.received: list[tuple[dict[str, str], bytes]] = []
        receiver = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:  # noqa: N802 - the http.server API
                length = int(self.headers.get("Content-Length", "0"))
                receiver.received.append((dict(self.headers.items()), self.rfile.read(length)))
                code = receiver.answers.pop(0) if receiver.answers else 200
                self.send_response(code)
                if location:
                    self.send_header("Location", location)
                self.send_header("Content-Length", "0")
                self.end_headers()

            def log_message(self, *args: object) -> None:
                pass

        self.server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self.thread = threading.Thread(target=self.server.serve_forever, daemon=True)
        self.thread.start()
        self.url = f"http://127.0.0.1:{self.server.server_address[1]}/hooks/evenframe"

    def close(self) -> None:
        self.server.shutdown()
        self.server.server_close()


@pytest.fixture
def receiver():
    made: list[Receiver] = []

    def make(answers: list[int] | None = None, location: str = "") -> Receiver:
        made.append(Receiver(answers, location))
        return made[-1]

    yield make
    for r in made:
        r.close()


@pytest.fixture
def queued(monkeypatch):
    """Notification messages the services put on the broker: (id, countdown) pairs."""
    box: list[tuple[int, float]] = []
    monkeypatch.setattr(
        messaging,
        "send_notification",
        lambda *, notification_id, countdown_s=0.0: box.append((notification_id, countdown_s)),
    )
    return box


def _complete(campaign: Campaign) -> None:
    from django.db import transaction

    with transaction.atomic():
        locked = services.lock_campaign(campaign.pk)
        services.set_status(
            locked, Campaign.Status.COMPLETED, detail="every quota is met", allowed_from=(Campaign.Status.RUNNING,)
        )


# --- the signature ----------------------------------------------------------------------------------------------


@pytest.mark.skipif(shutil.which("openssl") is None, reason="needs the openssl command")
def test_signature_matches_openssl_hmac_sha256():
    """Known answer from an independent implementation: ``openssl dgst -sha256 -hmac`` (OpenSSL; RFC 2104)."""
    body = notify.body_bytes({"event": "test", "campaign": {"name": "Bücher"}})
    out = subprocess.run(
        ["openssl", "dgst", "-sha256", "-hmac", "s3cret-key", "-r"],
        input=b"1700000000." + body,
        capture_output=True,
        check=True,
    ).stdout.decode()
    assert notify.signature(secret="s3cret-key", timestamp=1700000000, body=body) == "sha256=" + out.split()[0]


def test_verify_refuses_tampering_other_secrets_and_stale_timestamps():
    body = notify.body_bytes({"event": "test"})
    header = notify.signature(secret="k", timestamp=1000, body=body)
    assert notify.verify(secret="k", timestamp="1000", body=body, header=header, now=1100)
    assert not notify.verify(secret="k", timestamp="1000", body=body + b" ", header=header, now=1100)
    assert not notify.verify(secret="other", timestamp="1000", body=body, header=header, now=1100)
    assert not notify.verify(secret="k", timestamp="1000", body=body, header=header, now=1000 + 301)
    assert not notify.verify(secret="k", timestamp="not a number", body=body, header=header, now=1000)
    assert not notify.verify(secret="k", timestamp="1001", body=body, header=header, now=1001)


def test_retry_waits_double_up_to_an_hour():
    assert [notify.retry_delay_s(n) for n in (1, 2, 3)] == [30.0, 60.0, 120.0]
    assert notify.retry_delay_s(20) == 3600.0


# --- delivery ---------------------------------------------------------------------------------------------------------


def test_completion_posts_a_signed_webhook_and_retries_after_a_500(make_campaign, outbox, receiver, queued):
    hook = receiver(answers=[500])
    campaign = make_campaign(quotas={"chair": 2}, start=True)
    services.set_notifications(campaign_id=campaign.pk, url=hook.url)
    campaign.refresh_from_db()
    assert len(campaign.notify_secret) == 64

    _complete(campaign)

    (row,) = Notification.objects.filter(campaign=campaign)
    assert row.event == "campaign.completed" and row.channel == "webhook" and queued == [(row.pk, 0.0)]
    assert deliver(notification_id=row.pk) == "pending"  # the receiver answered 500
    row.refresh_from_db()
    assert row.attempts == 1 and row.last_status_code == 500 and row.next_attempt_at is not None
    assert queued[-1] == (row.pk, 30.0)  # the retry waits
    assert deliver(notification_id=row.pk) == "sent"
    row.refresh_from_db()
    assert row.state == "sent" and row.attempts == 2 and row.sent_at is not None
    assert deliver(notification_id=row.pk) == "not pending"  # a repeated message sends nothing
    assert len(hook.received) == 2
    deliveries = set()
    for headers, body in hook.received:
        assert headers["Content-Type"].startswith("application/json")
        assert headers["X-Evenframe-Event"] == "campaign.completed"
        assert notify.verify(
            secret=campaign.notify_secret,
            timestamp=headers["X-Evenframe-Timestamp"],
            body=body,
            header=headers["X-Evenframe-Signature"],
            now=time.time(),
        )
        deliveries.add(headers["X-Evenframe-Delivery"])
        payload = json.loads(body)
        assert payload["event"] == "campaign.completed" and payload["campaign"]["id"] == campaign.pk
        assert payload["campaign"]["status"] == "completed"
        assert payload["quotas"] == [{"class_name": "chair", "target": 2, "accepted": 0}]
    assert deliveries == {str(row.delivery_id)}  # retries keep the delivery id


def test_a_redirect_is_not_followed_and_attempts_end_in_failed(make_campaign, outbox, receiver, queued):
    other = receiver()
    hook = receiver(answers=[302] * notify.MAX_ATTEMPTS, location=other.url)
    campaign = make_campaign(start=True)
    services.set_notifications(campaign_id=campaign.pk, url=hook.url)
    (row,) = services.send_test_notification(campaign_id=campaign.pk)
    for _ in range(notify.MAX_ATTEMPTS):
        deliver(notification_id=row.pk)
    row.refresh_from_db()
    assert row.state == "failed" and row.attempts == notify.MAX_ATTEMPTS and row.last_status_code == 302
    assert len(hook.received) == notify.MAX_ATTEMPTS and other.received == []


def test_an_unreachable_receiver_is_a_failed_attempt_not_a_crash(make_campaign, outbox, queued):
    campaign = make_campaign(start=True)
    services.set_notifications(campaign_id=campaign.pk, url="http://127.0.0.1:9/nothing-listens-here")
    (row,) = services.send_test_notification(campaign_id=campaign.pk)
    assert deliver(notification_id=row.pk) == "pending"
    row.refresh_from_db()
    assert row.attempts == 1 and row.last_status_code is None and row.last_error


def test_private_addresses_are_refused_when_blocked(make_campaign, outbox, receiver, queued, settings):
    settings.WEBHOOK_BLOCK_PRIVATE = True
    hook = receiver()
    campaign = make_campaign(start=True)
    services.set_notifications(campaign_id=campaign.pk, url=hook.url)
    (row,) = services.send_test_notification(campaign_id=campaign.pk)
    deliver(notification_id=row.pk)
    row.refresh_from_db()
    assert hook.received == [] and "inside this network" in row.last_error


def test_budget_pause_sends_an_email_through_django_mail(make_campaign, outbox, queued):
    campaign = make_campaign(quotas={"chair": 4}, start=True)
    services.set_notifications(campaign_id=campaign.pk, emails="lead@example.org, ops@example.org")
    services.pause_campaign(campaign_id=campaign.pk, reason=Campaign.PauseReason.BUDGET, detail="spent 99")
    (row,) = Notification.objects.filter(campaign=campaign)
    assert row.event == "campaign.paused_budget" and row.channel == "email"
    assert deliver(notification_id=row.pk) == "sent"
    (message,) = mail.outbox
    assert message.to == ["lead@example.org", "ops@example.org"]
    assert campaign.name in message.subject and "cost budget" in message.subject
    assert "chair: 0 / 4" in message.body and "spent 99" in message.body


def test_a_pause_by_the_user_and_campaigns_without_channels_send_nothing(make_campaign, outbox, queued):
    quiet = make_campaign(start=True)
    _complete(quiet)
    loud = make_campaign(start=True)
    services.set_notifications(campaign_id=loud.pk, emails="lead@example.org")
    services.pause_campaign(campaign_id=loud.pk)
    assert not Notification.objects.exists() and queued == []


def test_failure_share_above_the_threshold_alerts_once_per_run(make_campaign, outbox, queued):
    campaign = make_campaign(start=True)
    services.set_notifications(campaign_id=campaign.pk, emails="lead@example.org", failure_rate=0.25)
    now = timezone.now()
    for i in range(8):  # 8 done frames, then dead ones
        Frame.objects.create(
            campaign=campaign,
            index=100 + i,
            state="done",
            seed=i,
            layout_index=100 + i,
            lighting_index=0,
            view_index=0,
            composition={"chair": 1},
            finished_at=now - timedelta(minutes=10 - i),
        )

    def dead_frame(index: int) -> None:
        frame = Frame.objects.create(
            campaign=campaign,
            index=index,
            state="running",
            seed=index,
            layout_index=index,
            lighting_index=0,
            view_index=0,
            composition={"chair": 1},
            dispatch_count=1,
            attempts=1,
        )
        services.record_failure(frame_id=frame.pk, dispatch_no=1, error="LayoutError: no fit", permanent=True)

    dead_frame(200)
    dead_frame(201)  # 2 of 10 finished dead: below 25 %
    assert not Notification.objects.exists()
    dead_frame(202)  # 3 of 11: 27 %
    (alert,) = Notification.objects.filter(event="campaign.failure_rate")
    assert "3 of the latest 11 finished frames are dead" in alert.payload["detail"]
    dead_frame(203)
    assert Notification.objects.filter(event="campaign.failure_rate").count() == 1  # once per run
    services.pause_campaign(campaign_id=campaign.pk)
    services.resume_campaign(campaign_id=campaign.pk)
    dead_frame(204)
    assert Notification.objects.filter(event="campaign.failure_rate").count() == 2  # resuming re-arms it


@pytest.mark.parametrize(
    "kwargs, field",
    [
        ({"url": "ftp://example.org/x"}, "notify_url"),
        ({"url": "https://"}, "notify_url"),
        ({"url": "https://user:pw@example.org/"}, "notify_url"),
        ({"url": "https://exa mple.org/"}, "notify_url"),
        ({"url": "https://example.org:99999/"}, "notify_url"),
        ({"url": "https://example.org/" + "x" * 500}, "notify_url"),
        ({"url": 42}, "notify_url"),
        ({"emails": "lead@example.org not-an-address"}, "notify_emails"),
        ({"emails": " ".join(f"a{i}@example.org" for i in range(11))}, "notify_emails"),
        ({"failure_rate": 1.5}, "notify_failure_rate"),
        ({"failure_rate": -0.1}, "notify_failure_rate"),
        ({"failure_rate": float("nan")}, "notify_failure_rate"),
        ({"failure_rate": "lots"}, "notify_failure_rate"),
    ],
)
def test_bad_notification_settings_change_nothing(make_campaign, kwargs, field):
    campaign = make_campaign()
    services.set_notifications(campaign_id=campaign.pk, url="https://example.org/hook", emails="a@example.org")
    before = Campaign.objects.filter(pk=campaign.pk).values().get()
    with pytest.raises(services.CampaignError) as error:
        services.set_notifications(campaign_id=campaign.pk, **kwargs)
    assert error.value.field == field
    assert Campaign.objects.filter(pk=campaign.pk).values().get() == before


def test_secret_is_kept_when_settings_change_and_replaced_on_rotation(make_campaign):
    campaign = make_campaign()
    first = services.set_notifications(campaign_id=campaign.pk, url="https://example.org/hook").notify_secret
    assert services.set_notifications(campaign_id=campaign.pk, url="https://example.org/other").notify_secret == first
    rotated = services.rotate_notification_secret(campaign_id=campaign.pk).notify_secret
    assert rotated != first and len(rotated) == 64


def test_the_sweep_resends_deliveries_whose_message_was_lost(make_campaign, outbox, queued):
    from campaigns import scheduler

    campaign = make_campaign(start=True)
    services.set_notifications(campaign_id=campaign.pk, emails="lead@example.org")
    (row,) = services.send_test_notification(campaign_id=campaign.pk)
    queued.clear()
    scheduler.sweep()
    assert queued == []  # just queued: not overdue
    Notification.objects.filter(pk=row.pk).update(created_at=timezone.now() - timedelta(minutes=10))
    counts = scheduler.sweep()
    assert counts["notifications"] == 1 and queued == [(row.pk, 0.0)]
    deliver(notification_id=row.pk)
    Notification.objects.filter(pk=row.pk).update(created_at=timezone.now() - timedelta(minutes=10))
    assert scheduler.sweep()["notifications"] == 0  # sent: nothing to resend
