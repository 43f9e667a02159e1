"""Browser tests: headless Debian Chromium driven by Playwright against pytest-django's live server, with a real
render worker process rendering tiny frames (64×48, 4 spp)."""

from __future__ import annotations

import pytest

from tests.dashboard.conftest import CUBE_OBJ_TEXT, PASSWORD, fail_frame

pytestmark = [pytest.mark.browser, pytest.mark.worker]


@pytest.fixture
def page(chromium_context):
    """A new page in a fresh headless Chromium (the shared ``chromium_context`` fixture, tests/conftest.py)."""
    return chromium_context.new_page()


def _login(page, base: str, username: str) -> None:
    page.goto(base + "/login/")
    page.fill("#id_username", username)
    page.fill("#id_password", PASSWORD)
    page.click("button[type=submit]")
    page.wait_for_url(base + "/campaigns/")


def test_plan_start_watch_retry_and_browse(
    page, live_server, people, object_classes, media_root, render_worker_factory, wait_until
):
    from campaigns.models import Campaign, Frame

    base = live_server.url
    _login(page, base, "pia")
    page.click("text=New campaign")
    page.wait_for_url(base + "/campaigns/new/")
    page.fill("#id_name", "Browser tiny")
    page.fill("#id_q_chair_target", "150")
    page.fill("#id_q_ottoman_target", "40")
    page.fill("#id_q_ottoman_visible", "0.3")
    for name, value in (
        ("b_render_width_px", "64"),
        ("b_render_height_px", "48"),
        ("b_render_spp", "4"),
        ("b_render_max_depth", "3"),
        ("b_room_width_m_min", "3"),
        ("b_room_width_m_max", "3.5"),
        ("b_room_depth_m_min", "3"),
        ("b_room_depth_m_max", "3.5"),
        ("b_thresholds_min_box_px", "3"),
        ("b_thresholds_min_visible_fraction", "0.2"),
        ("b_camera_focal_length_mm_min", "24"),
        ("b_camera_focal_length_mm_max", "35"),
        ("b_variation_views_per_lighting", "1"),
    ):
        page.fill(f"#id_{name}", value)
    # The estimate follows the form without a reload.
    page.wait_for_selector("#estimate .estimate-body:not([hidden])")
    page.wait_for_function("document.querySelector('[data-est=frames]').textContent.trim() !== ''")
    frames_estimate = int(page.text_content("[data-est=frames]"))
    assert frames_estimate > 0
    assert "constant measured on this machine" in page.text_content("[data-est=detail]")
    # A bad range shows inline and nothing is saved.
    page.fill("#id_b_camera_focal_length_mm_min", "60")
    page.click("button[name=save]")
    page.wait_for_selector(".budget-row.has-error .error")
    assert "greater than max" in page.text_content(".budget-row.has-error .error")
    assert not Campaign.objects.filter(name="Browser tiny").exists()
    page.fill("#id_b_camera_focal_length_mm_min", "24")
    page.click("button[name=save]")
    page.wait_for_selector("text=saved as a draft")
    campaign = Campaign.objects.get(name="Browser tiny")
    assert campaign.budget["camera"]["focal_length_mm"] == [24.0, 35.0]

    render_worker_factory(concurrency=1, threads=2)
    page.evaluate("window.__noReload = 1")
    page.click("button:has-text('Start')")
    page.wait_for_selector(".pill.status-running")
    page.evaluate("window.__noReload = 1")
    # Progress moves as the worker renders, without reloading the page.
    page.wait_for_function(
        "Number(document.querySelector('[data-live=frames_done]').textContent) >= 2", timeout=120_000
    )
    assert page.evaluate("window.__noReload") == 1
    assert float(page.text_content("[data-live=progress_pct]")) > 0
    page.wait_for_selector("#chart-balance .main-svg")

    # A failed job: a frame that died on a worker; retry it from the failed-jobs page.
    dead = fail_frame(campaign, index=900, error="RuntimeError: renderer lost its thread pool")
    page.click("nav.tabs >> text=Failed jobs")
    page.wait_for_selector("code.error-kind:has-text('RuntimeError: renderer lost its thread pool')")
    page.click("details >> summary:has-text('Traceback')")
    page.click("#frame-900 button:has-text('Retry')")
    page.wait_for_selector("text=sent back to the queue")
    wait_until(lambda: Frame.objects.get(pk=dead.pk).state == Frame.State.DONE, 90, "the retried frame to render")

    # Open a frame and see its boxes.
    page.click("nav.tabs >> text=Frames")
    page.click(".tile >> nth=0")
    page.wait_for_selector("h1:has-text('Frame')")
    index = int(page.url.rstrip("/").rsplit("/", 1)[1])
    frame = Frame.objects.get(campaign=campaign, index=index)
    boxes = frame.instances.exclude(bbox_xywh_px=None).count()
    assert page.locator("svg.boxes rect").count() == boxes
    if boxes:
        assert page.locator("svg.boxes rect").first.bounding_box()["width"] > 0
    # The image loads after the page does: wait for it before reading its size.
    page.wait_for_function(
        "() => { const img = document.querySelector('img.layer.rgb');"
        " return img && img.complete && img.naturalWidth > 0; }",
        timeout=15000,
    )
    assert page.evaluate("document.querySelector('img.layer.rgb').naturalWidth") == 64
    page.click("label[for=view-depth]")
    assert page.locator("img.layer.depth").is_visible()

    page.click("text=" + campaign.name)
    page.click("button:has-text('Pause')")
    page.wait_for_selector(".pill.status-paused")
    page.click("button:has-text('Cancel campaign')")
    page.wait_for_selector("h1:has-text('Cancel campaign')")  # the confirmation page: nothing changed yet
    page.click("button:has-text('Yes, cancel the campaign')")
    page.wait_for_selector(".pill.status-cancelled")


def test_upload_refuses_a_bad_file_and_takes_a_good_one(
    page, live_server, people, object_classes, media_root, tmp_path, monkeypatch
):
    from assets.models import Asset

    monkeypatch.setattr("assets.files.request_preview", lambda **kw: None)
    base = live_server.url
    _login(page, base, "pia")
    page.click("nav >> text=Assets")
    bad = tmp_path / "sofa.obj"
    bad.write_bytes(b"\x89PNG\r\n\x1a\n" + bytes(range(256)) * 4)
    page.fill("#id_name", "not a mesh")
    page.select_option("#id_object_class", "ottoman")
    page.set_input_files("#id_mesh", str(bad))
    page.click("button:has-text('Upload')")
    page.wait_for_selector(".field.has-error .error")
    assert "not a mesh file" in page.text_content(".field.has-error .error")
    assert not Asset.objects.filter(kind="mesh").exists()
    good = tmp_path / "box.obj"
    good.write_text(CUBE_OBJ_TEXT)
    page.fill("#id_name", "pouf box")
    page.select_option("#id_unit", "m")
    page.set_input_files("#id_mesh", str(good))
    page.click("button:has-text('Upload')")
    page.wait_for_selector("text=added to the library")
    assert page.locator("tr:has-text('pouf box') .asset-preview.pending").count() == 1
    assert Asset.objects.get(name="pouf box").kind == "mesh"
