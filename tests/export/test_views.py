"""The streamed, permission-checked zip download."""

from __future__ import annotations

import io
import zipfile

import pytest
from django.urls import reverse
from pycocotools.coco import COCO

from datasets.manifest import MANIFEST_NAME, iter_manifest_entries
from datasets.options import ExportOptions
from datasets.verify import verify_dataset
from datasets.writer import export_dataset

pytestmark = [pytest.mark.django_db, pytest.mark.filterwarnings("ignore::DeprecationWarning:pycocotools.*")]


def _url(campaign_id: int, query: str = "") -> str:
    return reverse("campaign-export-zip", kwargs={"campaign_id": campaign_id}) + (f"?{query}" if query else "")


def _download(client, url: str) -> tuple[int, bytes, object]:
    response = client.get(url)
    body = b"".join(response.streaming_content) if getattr(response, "streaming", False) else response.content
    return response.status_code, body, response


def test_owner_downloads_a_streamed_zip_that_verifies(client, real_campaign, tmp_path, capsys):
    client.force_login(real_campaign.owner)
    status, body, response = _download(client, _url(real_campaign.pk, "format=both&splits=0.5,0.25,0.25"))
    assert status == 200 and response.streaming
    assert response["Content-Type"] == "application/zip"
    assert f'filename="evenframe-campaign-{real_campaign.pk}.zip"' in response["Content-Disposition"]
    archive = zipfile.ZipFile(io.BytesIO(body))
    assert archive.testzip() is None
    root = f"evenframe-campaign-{real_campaign.pk}"
    names = archive.namelist()
    assert names[-1] == f"{root}/{MANIFEST_NAME}"  # the manifest comes last
    assert f"{root}/labels/000000.txt" in names and f"{root}/data.yaml" in names
    archive.extractall(tmp_path)
    report = verify_dataset(directory=tmp_path / root)
    assert report.ok, report.problems
    gt = COCO(str(tmp_path / root / "annotations" / "train.json"))  # pycocotools loads it
    assert gt.getAnnIds()
    # The same content as a directory export (checksums of every file but the manifest).
    directory = tmp_path / "directory-export"
    export_dataset(
        campaign_id=real_campaign.pk,
        out_dir=directory,
        options=ExportOptions(ratios=(0.5, 0.25, 0.25), formats=frozenset({"coco", "yolo"})),
    )
    zipped = {e["path"]: e["sha256"] for e in iter_manifest_entries(tmp_path / root / MANIFEST_NAME)}
    exported = {e["path"]: e["sha256"] for e in iter_manifest_entries(directory / MANIFEST_NAME)}
    assert zipped == exported
    capsys.readouterr()


def _team_viewer(campaign, django_user_model, username: str):
    from teams.models import Membership

    user = django_user_model.objects.create_user(username=username, password=f"{username}-password-123")
    Membership.objects.create(team=campaign.team, user=user, role=Membership.Role.VIEWER)
    return user


def test_team_members_may_download_outsiders_and_staff_may_not(client, real_campaign, django_user_model):
    stranger = django_user_model.objects.create_user(username="bo", password="bo-password-123")
    client.force_login(stranger)
    assert client.get(_url(real_campaign.pk)).status_code == 404  # outside the team: not even its existence
    stranger.is_staff = True  # staff status is no key to another team's data
    stranger.save()
    assert client.get(_url(real_campaign.pk)).status_code == 404
    client.force_login(_team_viewer(real_campaign, django_user_model, "vi"))
    status, body, _ = _download(client, _url(real_campaign.pk))  # reading is the viewer role
    assert status == 200 and zipfile.ZipFile(io.BytesIO(body)).testzip() is None
    client.logout()
    response = client.get(_url(real_campaign.pk))
    assert response.status_code == 302 and "/login/" in response["Location"]  # login required site-wide


def test_bad_options_unknown_campaign_and_empty_campaign(client, make_campaign, media_root):
    campaign = make_campaign(name="empty for download")
    client.force_login(campaign.owner)
    response = client.get(_url(campaign.pk, "splits=0.9,0.9,0.9"))
    assert response.status_code == 400 and b"splits: ratios must sum to 1" in response.content
    assert client.get(_url(campaign.pk, "format=voc")).status_code == 400
    for bad in ("rejected=hide", "yolo_ignore=blur", "background_below=-3", "background_below=chair%3Dx"):
        response = client.get(_url(campaign.pk, bad))
        assert response.status_code == 400, bad
        assert response.content.strip() and b"Traceback" not in response.content
    assert client.get(_url(999_999)).status_code == 404
    status, body, _ = _download(client, _url(campaign.pk))
    assert status == 200
    archive = zipfile.ZipFile(io.BytesIO(body))
    assert archive.testzip() is None
    assert f"evenframe-campaign-{campaign.pk}/annotations/train.json" in archive.namelist()
    assert client.post(_url(campaign.pk)).status_code == 405


def test_campaign_page_offers_the_download_to_team_members(client, real_campaign, django_user_model):
    link = _url(real_campaign.pk).encode()
    client.force_login(real_campaign.owner)
    page = client.get(reverse("campaigns:detail", kwargs={"campaign_id": real_campaign.pk}))
    assert page.status_code == 200 and link in page.content and b"Download dataset" in page.content
    client.force_login(_team_viewer(real_campaign, django_user_model, "cy"))
    page = client.get(reverse("campaigns:detail", kwargs={"campaign_id": real_campaign.pk}))
    assert page.status_code == 200 and link in page.content


def test_bad_options_from_the_page_show_the_form_with_the_message_and_the_values(client, make_campaign, media_root):
    campaign = make_campaign(name="form errors")
    client.force_login(campaign.owner)
    query = "splits=0.9,0.9,0.9&format=both&rejected=label&yolo_ignore=skip&background_below=16,chair%3D40"
    response = client.get(_url(campaign.pk, query), HTTP_ACCEPT="text/html,application/xhtml+xml")
    page = response.content.decode()
    assert response.status_code == 400 and response["Content-Type"].startswith("text/html")
    assert 'id="export-error"' in page and "splits: ratios must sum to 1" in page
    assert 'name="splits" value="0.9,0.9,0.9"' in page and 'value="16,chair=40"' in page
    assert '<option value="both" selected>' in page and '<option value="label" selected>' in page
    assert '<option value="skip" selected>' in page and "Download dataset (.zip)" in page
    assert reverse("campaigns:detail", args=[campaign.pk]) in page
    # A script (no text/html in Accept) still gets the one-line message.
    plain = client.get(_url(campaign.pk, query), HTTP_ACCEPT="*/*")
    assert plain.status_code == 400 and plain.content.startswith(b"splits: ratios must sum to 1")
    # The campaign page's card starts from the defaults, with no message.
    detail = client.get(reverse("campaigns:detail", args=[campaign.pk])).content.decode()
    assert 'name="splits" value="0.8,0.1,0.1"' in detail and 'id="export-error"' not in detail
