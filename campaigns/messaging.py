"""Messages to the fleet: render tasks on the broker, revocations, task ids, and the dispatch hook.

Both the services (which decide, inside a transaction, that frames must be sent, revoked or topped up) and the
scheduler (which sizes and sends) talk to the broker through here, so the services never import the scheduler:
``request_dispatch_on_commit`` calls the dispatcher the scheduler registers when Django starts
(``campaigns.apps.CampaignsConfig.ready``).
"""

from __future__ import annotations

import logging
from collections.abc import Callable

from django.db import transaction

from evenframe.celery import app

log = logging.getLogger("evenframe.campaigns")

TASK_NAME = "evenframe.render_frame"
NOTIFY_TASK_NAME = "evenframe.deliver_notification"
TASK_ID_PREFIX = "ef"

_dispatcher: Callable[..., int] | None = None


def task_id(*, campaign_id: int, index: int, dispatch_no: int, prefix: str = TASK_ID_PREFIX) -> str:
    """The broker task id of one dispatch of a frame (the one format, also used to revoke it)."""
    return f"{prefix}-c{int(campaign_id)}-f{int(index)}-d{int(dispatch_no)}"


def send_frame_task(
    *, frame_id: int, dispatch_no: int, campaign_uid: str, task_id: str, countdown_s: float = 0.0
) -> None:
    """Put one render task on the broker. Tests replace this to capture messages instead."""
    app.send_task(
        TASK_NAME,
        kwargs={"frame_id": frame_id, "dispatch_no": dispatch_no, "campaign_uid": campaign_uid},
        task_id=task_id,
        countdown=countdown_s if countdown_s > 0 else None,
    )


def revoke_tasks(*, task_ids: list[str]) -> None:
    """Best effort: brokers with remote control (Redis) drop the messages; the task re-checks state anyway."""
    if not task_ids:
        return
    from django.conf import settings

    if settings.CELERY_BROKER_URL.startswith("filesystem://"):
        return  # no remote control on this transport; claim_frame releases the frames instead
    try:
        app.control.revoke(task_ids)
    except Exception:  # noqa: BLE001 - revocation is an optimisation; claim_frame is the guarantee
        log.warning("could not revoke %d task(s); workers will release them at start", len(task_ids), exc_info=True)


def register_dispatcher(dispatch: Callable[..., int]) -> None:
    """Set the function that tops up a campaign's frames in flight (``campaigns.scheduler.dispatch``)."""
    global _dispatcher
    _dispatcher = dispatch


def request_dispatch_on_commit(campaign_id: int | None) -> None:
    """Top up ``campaign_id``'s frames in flight (all running campaigns for None) once the transaction commits."""

    def run() -> None:
        if _dispatcher is None:
            log.warning("no dispatcher registered; campaign %s waits for the next sweep", campaign_id)
            return
        _dispatcher(campaign_id=campaign_id)

    transaction.on_commit(run)


def revoke_on_commit(task_ids: list[str]) -> None:
    """Revoke the messages of frames taken back, once the transaction commits."""
    if task_ids:
        transaction.on_commit(lambda: revoke_tasks(task_ids=task_ids))


def send_notification(*, notification_id: int, countdown_s: float = 0.0) -> None:
    """Put one notification delivery on the broker. Tests replace this to deliver in-process."""
    try:
        app.send_task(
            NOTIFY_TASK_NAME,
            kwargs={"notification_id": notification_id},
            countdown=countdown_s if countdown_s > 0 else None,
        )
    except Exception:  # noqa: BLE001 - the sweep resends pending notifications whose message never left
        log.warning("could not queue notification %s; the sweep sends it later", notification_id, exc_info=True)


def send_notification_on_commit(*, notification_id: int, countdown_s: float = 0.0) -> None:
    transaction.on_commit(lambda: send_notification(notification_id=notification_id, countdown_s=countdown_s))
