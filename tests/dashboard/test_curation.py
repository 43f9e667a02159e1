"""Curation: planners leave frames out of exports (one frame or every frame a gallery filter selects), with a reason;
viewers and outsiders cannot; gallery filters by contrast, box size and export state; bad input is refused."""

from __future__ import annotations

import pytest
from django.urls import reverse

from campaigns import services
from campaigns.models import Frame, Instance

pytestmark = pytest.mark.django_db


def _done(campaign):
    return Frame.objects.filter(campaign=campaign, state=Frame.State.DONE).order_by("index")


def test_planner_excludes_a_frame_with_a_reason_and_puts_it_back(client, done_campaign, people):
    frame = _done(done_campaign).first()
    client.force_login(people["pia"])
    page = client.get(reverse("campaigns:frame", args=[done_campaign.pk, frame.index])).content.decode()
    assert "Leave out of exports" in page
    response = client.post(
        reverse("campaigns:frames-exclude", args=[done_campaign.pk]),
        {"frame": frame.index, "reason": "  sofa   hidden behind the lamp "},
        follow=True,
    )
    assert response.status_code == 200 and "1 frame left out of exports" in response.content.decode()
    frame.refresh_from_db()
    assert frame.excluded_at is not None and frame.excluded_reason == "sofa hidden behind the lamp"
    page = client.get(reverse("campaigns:frame", args=[done_campaign.pk, frame.index])).content.decode()
    assert "Left out of exports" in page and "sofa hidden behind the lamp" in page
    client.post(reverse("campaigns:frame-include", args=[done_campaign.pk, frame.index]))
    frame.refresh_from_db()
    assert frame.excluded_at is None and frame.excluded_reason == ""


@pytest.mark.parametrize("reason", ["", "   ", "a" * 501, "bad\x00reason"])
def test_a_reason_is_required_and_checked(client, done_campaign, people, reason):
    frame = _done(done_campaign).first()
    client.force_login(people["pia"])
    response = client.post(
        reverse("campaigns:frames-exclude", args=[done_campaign.pk]), {"frame": frame.index, "reason": reason}
    )
    assert response.status_code == 302
    frame.refresh_from_db()
    assert frame.excluded_at is None  # nothing changed


@pytest.mark.parametrize("index", ["", "x", "-1", "99999999999999999999", "999"])
def test_odd_frame_numbers_never_crash(client, done_campaign, people, index):
    client.force_login(people["pia"])
    response = client.post(
        reverse("campaigns:frames-exclude", args=[done_campaign.pk]), {"frame": index, "reason": "why"}
    )
    assert response.status_code in (302, 404)
    if index == "":  # no frame named: the (empty) gallery filter selects every done frame
        assert _done(done_campaign).filter(excluded_at__isnull=False).count() == _done(done_campaign).count()
    else:
        assert not Frame.objects.filter(campaign=done_campaign, excluded_at__isnull=False).exists()


def test_viewer_and_outsider_cannot_exclude(client, done_campaign, people):
    frame = _done(done_campaign).first()
    for user, status in (("vera", 403), ("otto", 404)):
        client.force_login(people[user])
        url = reverse("campaigns:frames-exclude", args=[done_campaign.pk])
        assert client.post(url, {"frame": frame.index, "reason": "no"}).status_code == status
        assert (
            client.post(reverse("campaigns:frame-include", args=[done_campaign.pk, frame.index])).status_code == status
        )
        page = client.get(reverse("campaigns:frame", args=[done_campaign.pk, frame.index]))
        assert status == 404 or "Leave out of exports" not in page.content.decode()
    frame.refresh_from_db()
    assert frame.excluded_at is None


def test_gallery_excludes_exactly_the_frames_its_filters_select(client, done_campaign, people):
    done = set(_done(done_campaign).values_list("index", flat=True))
    by_class: dict[str, set[int]] = {}
    for name, index in Instance.objects.filter(campaign=done_campaign).values_list(
        "object_class__name", "frame__index"
    ):
        by_class.setdefault(name, set()).add(index)
    quoted = set(done_campaign.quotas.values_list("object_class__name", flat=True))  # the gallery's class choices
    name, selected = next((n, f) for n, f in sorted(by_class.items()) if n in quoted and f != done)  # a proper subset
    client.force_login(people["pia"])
    gallery = client.get(reverse("campaigns:gallery", args=[done_campaign.pk]), {"class": name})
    count = len(selected)
    assert ("Leave this frame" if count == 1 else f"Leave these {count} frames") in gallery.content.decode()
    client.post(reverse("campaigns:frames-exclude", args=[done_campaign.pk]), {"class": name, "reason": "crowded"})
    excluded = set(_done(done_campaign).filter(excluded_at__isnull=False).values_list("index", flat=True))
    assert excluded == selected
    shown = client.get(reverse("campaigns:gallery", args=[done_campaign.pk]), {"export": "excluded"})
    assert {t["frame"].index for t in shown.context["tiles"]} == selected
    assert "left out" in shown.content.decode()
    assert "out of exports</button>" not in shown.content.decode()  # nothing left to leave out there
    again = client.get(reverse("campaigns:gallery", args=[done_campaign.pk]), {"class": name})
    assert "out of exports</button>" not in again.content.decode()  # every selected frame is out already
    kept = client.get(reverse("campaigns:gallery", args=[done_campaign.pk]), {"export": "included"})
    assert {t["frame"].index for t in kept.context["tiles"]} == done - selected


def test_rejected_filter_shows_only_visible_rejected_instances(client, done_campaign, people):
    """An instance rejected as "not visible" has no pixels to look at: the "rejected" filter leaves it out."""
    client.force_login(people["vera"])
    page = client.get(reverse("campaigns:gallery", args=[done_campaign.pk]), {"accepted": "rejected"})
    expected = set(
        Instance.objects.filter(campaign=done_campaign, accepted=False, mask_area_px__gt=0).values_list(
            "frame__index", flat=True
        )
    )
    assert {t["frame"].index for t in page.context["tiles"]} == expected
    for tile in page.context["tiles"]:
        assert all(b["mask_area_px"] > 0 for b in tile["boxes"] if b["matches"])


def test_gallery_filters_by_contrast_and_box_size_like_a_recount(client, done_campaign, people):
    client.force_login(people["vera"])
    rows = list(Instance.objects.filter(campaign=done_campaign).values("frame__index", "contrast", "bbox_xywh_px"))
    contrasts = sorted(r["contrast"] for r in rows if r["contrast"] is not None)
    sides = sorted(min(r["bbox_xywh_px"][2:]) for r in rows if r["bbox_xywh_px"])
    limits = {"min_contrast": contrasts[len(contrasts) // 2], "min_box": sides[len(sides) // 2]}
    for key, limit in limits.items():
        expected = {
            r["frame__index"]
            for r in rows
            if (key == "min_contrast" and r["contrast"] is not None and r["contrast"] >= limit)
            or (key == "min_box" and r["bbox_xywh_px"] and min(r["bbox_xywh_px"][2:]) >= limit)
        }
        page = client.get(reverse("campaigns:gallery", args=[done_campaign.pk]), {key: f"{limit!r}"})
        assert page.status_code == 200
        assert {t["frame"].index for t in page.context["tiles"]} == expected, key
        assert "Leave these" not in page.content.decode()  # a viewer gets no curation form
    for odd in ("x", "nan", "-5", "1e400", "\x00"):
        for key in ("min_contrast", "min_box", "export", "min_visible"):
            assert client.get(reverse("campaigns:gallery", args=[done_campaign.pk]), {key: odd}).status_code == 200


def test_service_excludes_only_done_frames_of_its_campaign(done_campaign):
    dead = Frame.objects.filter(campaign=done_campaign, state=Frame.State.DEAD).first()
    done = _done(done_campaign).first()
    changed = services.exclude_frames(campaign_id=done_campaign.pk, frame_ids=[dead.pk, done.pk], reason="test")
    assert changed == 1
    assert services.exclude_frames(campaign_id=done_campaign.pk, frame_ids=[done.pk], reason="again") == 0
    done.refresh_from_db()
    assert done.excluded_reason == "test"  # an excluded frame keeps its first reason
    with pytest.raises(services.CampaignError) as caught:
        services.exclude_frames(campaign_id=done_campaign.pk, frame_ids=[done.pk], reason=5)
    assert caught.value.field == "reason"
