"""The overview's appearance coverage: texture families and distractors of the done frames, read from scene files.

Frames are recorded through the services with hand-written scene files whose counts are known; the render core's
own specs are checked against the same tally in ``test_texture_families_of_a_real_spec``.
"""

from __future__ import annotations

import json
import re
from collections import Counter

import pytest
from django.urls import reverse

from campaigns import selectors

pytestmark = pytest.mark.django_db


def _material(family: str | None) -> dict:
    material = {"kind": "diffuse", "rgb": [0.5, 0.5, 0.5], "roughness": 1.0}
    if family:
        material["texture"] = {"family": family, "variant": 1, "params": {}, "seed": 1}
    return material


def _spec(
    room: dict[str, str | None], objects: list[dict[str, str | None]], distractors: list[dict[str, str | None]] | None
) -> dict:
    """A scene file as the render core writes it: ``distractors`` listed only when there are some; a spec made
    before distractors existed (``distractors=None``) has no ``distractor_count`` in its budget either."""
    spec = {
        "room": {"materials": {slot: _material(family) for slot, family in room.items()}},
        "objects": [
            {"class_name": "chair", "materials": {slot: _material(f) for slot, f in parts.items()}} for parts in objects
        ],
        "lights": [],
        "camera": {},
        "budget": {"appearance": {"texture_probability": 0.8}},
    }
    if distractors is not None:
        spec["budget"]["appearance"]["distractor_count"] = [0, 6]
    if distractors:
        spec["distractors"] = [
            {"kind": "box", "materials": {slot: _material(f) for slot, f in parts.items()}} for parts in distractors
        ]
    return spec


# Four frames: 18 material slots, 7 of them plain; distractors 3, 0, 5 and one older spec that cannot have any.
SPECS = [
    _spec(
        {"floor": "parquet", "wall": "plaster", "ceiling": None},
        [{"frame": "wood", "seat": None}],
        [{"body": "rug"}, {"body": None}, {"body": None}],
    ),
    _spec(
        {"floor": "ceramic_tile", "wall": "plaster", "ceiling": "plaster"},
        [{"frame": None, "seat": "fabric"}, {"upholstery": "fabric"}],
        [],
    ),
    _spec({"floor": "parquet", "wall": "wallpaper", "ceiling": None}, [], [{}] * 5),
    _spec({"floor": None}, [], None),
]
EXPECTED_FAMILIES = {
    "plaster": 3,
    "parquet": 2,
    "fabric": 2,
    "ceramic_tile": 1,
    "wood": 1,
    "wallpaper": 1,
    "rug": 1,
    "plain": 7,
}


def _record(campaign, media_root, specs, *, first_index: int = 0, write_files: bool = True) -> None:
    from django.db import transaction

    from campaigns import services
    from campaigns.frame_files import frame_output_dir

    for offset, spec in enumerate(specs):
        index = first_index + offset
        with transaction.atomic():
            frame = services.create_frame(
                campaign=campaign,
                index=index,
                coordinates=(index, 0, 0),
                composition={"chair": 1},
                expected_cpu_s=0.5,
                task_id_prefix="cov",
            )
        assert services.claim_frame(frame_id=frame.pk, dispatch_no=1, worker_host="w1@test").ok
        absolute, relative = frame_output_dir(campaign_id=campaign.pk, index=index)
        if write_files:
            absolute.mkdir(parents=True)
            (absolute / "scene.json").write_text(json.dumps(spec), encoding="utf-8")
        assert services.record_result(
            frame_id=frame.pk,
            dispatch_no=1,
            labels=[],
            cpu_s=0.4,
            wall_s=0.5,
            output_dir=relative,
            worker_host="w1@test",
        )


@pytest.fixture
def textured_campaign(make_campaign, media_root, outbox):
    campaign = make_campaign("textured", start=True)
    _record(campaign, media_root, SPECS)
    campaign.refresh_from_db()
    return campaign


def _row_slots(page: str, family: str) -> int:
    match = re.search(r'<tr data-family="' + re.escape(family) + r'"[^>]*>.*?data-t="slots">(\d+)<', page, re.S)
    assert match, family
    return int(match.group(1))


def test_overview_shows_texture_families_and_distractors(client, textured_campaign, people):
    client.force_login(people["vera"])
    response = client.get(reverse("campaigns:detail", args=[textured_campaign.pk]))
    assert response.status_code == 200
    page = response.content.decode()
    assert "Surface textures" in page and "Distractors per frame" in page
    assert set(re.findall(r'<tr data-family="([^"]+)"', page)) == set(EXPECTED_FAMILIES)
    for family, slots in EXPECTED_FAMILIES.items():
        assert _row_slots(page, family) == slots, family
    # Most used first, plain surfaces last.
    assert re.findall(r'<tr data-family="([^"]+)"', page)[0] == "plaster"
    assert re.findall(r'<tr data-family="([^"]+)"', page)[-1] == "plain"
    assert "latest 4 done frames: 18 slots, 61.1 % textured, 7 families" in page
    assert "<td>ceramic tile</td>" in page and "<td>plain (no texture)</td>" in page
    from render.textures import FAMILIES

    not_drawn = sorted(set(FAMILIES) - set(EXPECTED_FAMILIES))
    assert (
        f"Not drawn in these frames ({len(not_drawn)} of {len(FAMILIES)} families): "
        f"{', '.join(name.replace('_', ' ') for name in not_drawn)}."
    ) in page
    summary = re.sub(r"<[^>]+>", "", re.search(r'id="distractor-summary">(.*?)</p>', page, re.S).group(1))
    drawn = textured_campaign.budget.get("appearance", {}).get("distractor_count")
    note = f" (the budget draws {drawn[0]}–{drawn[1]}; items that find no free spot are left out)" if drawn else ""
    assert " ".join(summary.split()) == f"Min 0 · median 3 · max 5 unlabelled objects, over 3 frames{note}."
    bars = re.findall(
        r'<span class="bar" style="height: [\d.]+%"><span class="bar-count">(\d+)</span></span>'
        r'<span class="bar-label">([^<]+)</span>',
        page,
    )
    assert bars == [("1", "0"), ("0", "1"), ("0", "2"), ("1", "3"), ("0", "4"), ("1", "5")]


def test_live_json_carries_the_same_appearance(client, textured_campaign, people):
    client.force_login(people["vera"])
    live = client.get(reverse("campaigns:live", args=[textured_campaign.pk]) + "?coverage=1").json()
    appearance = live["coverage"]["appearance"]
    assert {row["family"]: row["slots"] for row in appearance["textures"]} == EXPECTED_FAMILIES
    assert appearance["frames"] == 4 and appearance["slots"] == 18
    assert {k: appearance["distractors"][k] for k in ("frames", "min", "median", "max")} == {
        "frames": 3,
        "min": 0,
        "median": 3,
        "max": 5,
    }


def test_sample_is_the_latest_frames_and_says_of_how_many(textured_campaign, media_root):
    coverage = selectors.coverage_sample(campaign=textured_campaign, limit=2)
    appearance = coverage["appearance"]
    # The latest two by finish time are the last two recorded: frames 2 and 3.
    assert coverage["frames_read"] == 2 and coverage["frames_done"] == 4
    assert {row["family"]: row["slots"] for row in appearance["textures"]} == {"parquet": 1, "wallpaper": 1, "plain": 2}
    assert appearance["distractors"]["frames"] == 1  # the older spec (frame 3) cannot say
    assert appearance["distractors"]["max"] == 5


def test_many_distractor_counts_share_bars():
    summary = selectors.appearance_summary(families=Counter(), distractor_counts=list(range(40)), frames=40)
    bars = summary["distractors"]["bars"]
    assert len(bars) <= selectors.DISTRACTOR_HISTOGRAM_BARS
    assert bars[0]["label"] == "0–2" and bars[-1]["label"] == "39"
    assert sum(bar["frames"] for bar in bars) == 40
    assert summary["textures"] == [] and summary["textured_pct"] == 0.0


def test_campaign_without_frames_shows_an_empty_state(client, make_campaign, people):
    campaign = make_campaign("nothing yet")
    client.force_login(people["vera"])
    response = client.get(reverse("campaigns:detail", args=[campaign.pk]))
    assert response.status_code == 200
    page = response.content.decode()
    assert "No done frames yet: camera, light, texture and distractor coverage appear here once frames finish." in page
    assert 'id="texture-table"' not in page and "Sampled values of the latest" not in page


def test_frames_without_readable_scene_files_say_so(client, make_campaign, people, media_root, outbox):
    campaign = make_campaign("files gone", start=True)
    _record(campaign, media_root, SPECS[:2], write_files=False)
    client.force_login(people["vera"])
    response = client.get(reverse("campaigns:detail", args=[campaign.pk]))
    assert response.status_code == 200
    page = response.content.decode()
    assert "The scene files of these frames could not be read." in page
    assert "None of these frames lists distractors in its scene file." in page


def test_frames_without_distractors_in_their_specs(client, make_campaign, people, media_root, outbox):
    campaign = make_campaign("older frames", start=True)
    _record(campaign, media_root, [SPECS[3]])
    client.force_login(people["vera"])
    page = client.get(reverse("campaigns:detail", args=[campaign.pk])).content.decode()
    assert _row_slots(page, "plain") == 1
    assert "None of these frames lists distractors in its scene file." in page


def test_another_teams_user_gets_404(client, textured_campaign, people):
    client.force_login(people["otto"])
    assert client.get(reverse("campaigns:detail", args=[textured_campaign.pk])).status_code == 404
    assert client.get(reverse("campaigns:live", args=[textured_campaign.pk]) + "?coverage=1").status_code == 404


def test_texture_families_and_distractors_of_a_real_spec():
    from render.spec import make_spec

    spec = make_spec({"render": {"width_px": 32, "height_px": 24, "spp": 1}}, {"chair": 2, "wall_clock": 1}, 5)
    expected: Counter[str] = Counter()
    parts = [*spec["objects"], *spec.get("distractors", [])]
    for material in [*spec["room"]["materials"].values(), *(m for item in parts for m in item["materials"].values())]:
        expected[material["texture"]["family"] if "texture" in material else "plain"] += 1
    assert selectors.texture_families(spec) == expected
    assert sum(expected.values()) > len(spec["room"]["materials"])  # objects' parts are counted too
    assert selectors.distractor_count(spec) == len(spec.get("distractors", []))


def test_overview_shows_room_types_and_arrangements(client, make_campaign, media_root, outbox, people):
    """Frames per room type and per arrangement, from the scene files; a spec made before room types counts in
    neither table."""
    specs = []
    for room_type, mode in (("bedroom", "home"), ("bedroom", "free"), ("office", "home"), (None, None)):
        spec = _spec({"floor": None}, [], [])
        if room_type:
            spec["room"]["room_type"] = room_type
            spec["layout_mode"] = mode
        specs.append(spec)
    campaign = make_campaign("rooms", start=True)
    _record(campaign, media_root, specs)
    client.force_login(people["vera"])
    page = client.get(reverse("campaigns:detail", args=[campaign.pk])).content.decode()
    rows = re.findall(r'<tr data-room="([^"]+)"><td>[^<]+</td><td>(\d+)</td><td>([\d.]+) %</td>', page)
    assert rows == [("bedroom", "2", "66.7"), ("office", "1", "33.3")]
    modes = " ".join(re.sub(r"<[^>]+>", "", re.search(r'id="layout-modes">(.*?)</p>', page, re.S).group(1)).split())
    assert modes == "Arrangement: like a home 66.7 % · free random placement 33.3 %."


def test_colour_temperature_is_charted_per_light_kind_against_its_own_range(make_campaign, media_root, outbox):
    """Lamps draw their CCT from the budget's lighting.cct_k, daylight from the render core's sun and sky ranges
    (render.lights.SUN_CCT_K, SKY_CCT_K): a 9,000 K sky is not a lamp outside its budget."""
    from render.lights import SKY_CCT_K, SUN_CCT_K

    campaign = make_campaign("daylight", start=True)
    lights = [
        {"kind": "point", "cct_k": 3000.0, "flux_lm": 800.0},
        {"kind": "panel", "cct_k": 4000.0, "flux_lm": 2000.0},
        {"kind": "sun", "cct_k": 5600.0},
        {"kind": "dome", "cct_k": 9000.0, "illuminance_lux": 12000.0},
    ]
    spec = {"room": {}, "objects": [], "lights": lights, "camera": {}, "budget": {}}
    _record(campaign, media_root, [spec])
    cov = selectors.coverage_sample(campaign=campaign)
    assert cov["cct"] == {"point": [3000.0], "panel": [4000.0], "sun": [5600.0], "dome": [9000.0]}
    lamps = campaign.budget["lighting"]["cct_k"]
    assert cov["cct_ranges"] == {"point": lamps, "panel": lamps, "sun": list(SUN_CCT_K), "dome": list(SKY_CCT_K)}
    for kind, (value,) in cov["cct"].items():
        low, high = cov["cct_ranges"][kind]
        assert low <= value <= high, kind  # every light inside its own kind's range
    assert "cct_k" not in cov["values"]  # no longer one histogram for all kinds against the lamps' range
