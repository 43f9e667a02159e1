"""Per-campaign asset choice, per-asset orientation and look, and uploads (zip, refusals) through the services.

Outside references: Wavefront OBJ / MTL (hand-written files below); PKWARE APPNOTE (zip entries); the glTF 2.0
specification §3.4 (+Y up, front +Z) for the orientation defaults.
"""

from __future__ import annotations

import io
import zipfile
from decimal import Decimal

import pytest
from django.core.files.uploadedfile import SimpleUploadedFile
from django.urls import reverse

from assets import files as asset_files
from assets import services as asset_services
from assets.models import Asset
from campaigns import selectors, services
from campaigns.models import Campaign
from tests.campaigns.conftest import TINY_BUDGET

CUBE_OBJ = "".join(f"v {x} {y} {z}\n" for x in (-0.2, 0.2) for y in (-0.15, 0.15) for z in (0.0, 0.3)) + (
    "f 1 2 4 3\nf 5 7 8 6\nf 1 5 6 2\nf 3 4 8 7\nf 1 3 7 5\nf 2 6 8 4\n"
)


@pytest.fixture
def no_preview(monkeypatch):
    requested = []
    monkeypatch.setattr("assets.files.request_preview", lambda **kw: requested.append(kw))
    return requested


@pytest.fixture
def team(user):
    from teams.permissions import personal_team

    return personal_team(user=user)


def _upload(
    user, team, *, name="cube", object_class="ottoman", content: bytes | None = None, filename="cube.obj", **kwargs
):
    data = CUBE_OBJ.encode() if content is None else content
    return asset_services.upload_mesh_asset(
        user=user,
        team=team,
        object_class_name=object_class,
        name=name,
        upload=SimpleUploadedFile(filename, data),
        unit="m",
        **kwargs,
    )


def _create(user, name, quotas, **kwargs) -> Campaign:
    return services.create_campaign(
        owner=user,
        name=name,
        quotas=[services.QuotaInput(k, v) for k, v in quotas.items()],
        budget=TINY_BUDGET,
        cost_budget=Decimal("100"),
        price_per_cpu_hour=Decimal("0.05"),
        seed=3,
        **kwargs,
    )


def _asset_ids_in_specs(campaign: Campaign, composition: dict[str, int], seeds: range) -> set[str]:
    from render.spec import make_spec

    entries = selectors.campaign_user_mesh_entries(campaign=campaign)
    ids = set()
    for seed in seeds:
        spec = make_spec(TINY_BUDGET, composition, seed, user_assets=entries or None)
        ids |= {o["asset_id"] for o in spec["objects"]}
    return ids


def test_an_upload_joins_only_the_campaigns_that_choose_it(user, team, classes, media_root, no_preview):
    upload = _upload(user, team)
    procedural = Asset.objects.get(name="procedural ottoman")
    # A campaign made after the upload that does not choose it: procedural assets only, no upload in any spec.
    default = _create(user, "default", {"ottoman": 2})
    assert set(default.assets.all()) == {procedural}
    assert selectors.campaign_user_mesh_entries(campaign=default) == {}
    assert f"user/{upload.pk}" not in _asset_ids_in_specs(default, {"ottoman": 2}, range(6))
    # One that chooses it gets it: each instance picks uniformly among generator and upload (layout stream), so
    # over 6 frames × 2 instances the upload shows up (probability of never: 2^-12).
    chosen = _create(user, "chosen", {"ottoman": 2}, asset_ids=[procedural.pk, upload.pk])
    entries = selectors.campaign_user_mesh_entries(campaign=chosen)
    assert [e["asset_id"] for e in entries["ottoman"]] == [f"user/{upload.pk}"]
    assert f"user/{upload.pk}" in _asset_ids_in_specs(chosen, {"ottoman": 2}, range(6))


def test_an_only_upload_of_a_class_without_generator_is_preselected(user, team, classes, media_root, no_preview):
    from assets.models import ObjectClass

    lamp = asset_services.ensure_object_class(
        name="floor_lamp"
    )  # a render-core class with no procedural asset row here
    assert not Asset.objects.filter(object_class=lamp, kind="procedural").exists()
    only = _upload(user, team, name="tall lamp", object_class="floor_lamp")
    campaign = _create(user, "lamps", {"floor_lamp": 1, "chair": 1})
    assert only in campaign.assets.all()
    # Two uploads of that class: nothing to go by, so none is preselected (the planner ticks them).
    _upload(user, team, name="short lamp", object_class="floor_lamp")
    campaign2 = _create(user, "lamps 2", {"floor_lamp": 1})
    assert not campaign2.assets.filter(kind="mesh").exists()
    assert ObjectClass.objects.filter(name="floor_lamp").exists()


def test_editing_a_draft_keeps_its_choice(user, team, classes, media_root, no_preview):
    upload = _upload(user, team)
    campaign = _create(user, "edit me", {"ottoman": 2}, asset_ids=[upload.pk])
    services.update_draft_campaign(
        campaign_id=campaign.pk,
        name="edited",
        quotas=[services.QuotaInput("ottoman", 3)],
        budget=TINY_BUDGET,
        cost_budget=Decimal("100"),
        price_per_cpu_hour=Decimal("0.05"),
    )
    assert set(campaign.assets.all()) == {upload}
    other = _create(user, "no upload", {"ottoman": 2})
    services.update_draft_campaign(
        campaign_id=other.pk,
        name="no upload",
        quotas=[services.QuotaInput("ottoman", 3)],
        budget=TINY_BUDGET,
        cost_budget=Decimal("100"),
        price_per_cpu_hour=Decimal("0.05"),
    )
    assert not other.assets.filter(kind="mesh").exists()


def _plan_data(user, **overrides) -> dict:
    """The planner form's own initial values (every budget field at its default), then ``overrides``."""
    from django import forms

    from dashboard.forms import CampaignForm

    form = CampaignForm(user=user)
    data = {}
    for name, field in form.fields.items():
        value = form[name].value()
        if isinstance(field, forms.BooleanField):
            if value:
                data[name] = "on"
        elif value is not None:
            data[name] = value
    data.update(overrides)
    return data


def test_planner_form_choice_reaches_the_campaign(client, user, team, classes, media_root, no_preview):
    upload = _upload(user, team, object_class="wall_clock")
    client.force_login(user)
    page = client.get(reverse("campaigns:create")).content.decode()
    assert f'value="{upload.pk}"' in page and 'name="assets_shown"' in page
    procedural_ids = list(Asset.objects.filter(kind="procedural").values_list("pk", flat=True))
    for name, ticked in (("without", procedural_ids), ("with", [*procedural_ids, upload.pk])):
        response = client.post(
            reverse("campaigns:create"),
            _plan_data(
                user, name=name, team=team.pk, assets=ticked, assets_shown="on", q_chair_target=2, q_wall_clock_target=1
            ),
        )
        assert response.status_code == 302, response.context["form"].errors if response.context else response
    assert not Campaign.objects.get(name="without").assets.filter(pk=upload.pk).exists()
    assert Campaign.objects.get(name="with").assets.filter(pk=upload.pk).exists()
    # Only assets of classes with a target go with the campaign (the plan quotes chair and wall_clock).
    assert set(Campaign.objects.get(name="with").assets.values_list("object_class__name", flat=True)) == {
        "chair",
        "wall_clock",
    }


def test_orientation_and_look_go_from_upload_to_the_spec_entries(user, team, classes, media_root, no_preview):
    upload = _upload(user, team, object_class="wall_clock", up_axis="+y", front="+z", look="keep")
    assert (upload.up_axis, upload.front, upload.look) == ("+y", "+z", "keep")
    # Normalized size in metres (x across the front, y front to back, z up): the cube's file y (0.3 m) is now up.
    assert asset_files.asset_info(upload.pk)["extents_m"] == [0.4, 0.3, 0.3]
    campaign = _create(user, "clocks", {"wall_clock": 1}, asset_ids=[upload.pk])
    (entry,) = selectors.campaign_user_mesh_entries(campaign=campaign)["wall_clock"]
    assert (entry["up_axis"], entry["front"], entry["look"], entry["placement"]) == ("+y", "+z", "keep", "wall")


def test_front_along_the_up_axis_is_refused_before_anything_is_stored(user, team, classes, media_root, no_preview):
    with pytest.raises(asset_services.AssetError) as caught:
        _upload(user, team, up_axis="+y", front="-y")
    assert caught.value.field == "front"
    assert not Asset.objects.filter(kind="mesh").exists() and not (media_root / "assets").exists()


def _zip_bytes(entries: dict[str, bytes]) -> bytes:
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", zipfile.ZIP_DEFLATED) as archive:
        for name, data in entries.items():
            archive.writestr(name, data)
    return buffer.getvalue()


def _png_bytes() -> bytes:
    from PIL import Image

    out = io.BytesIO()
    Image.new("RGB", (8, 8), (180, 120, 60)).save(out, format="PNG")
    return out.getvalue()


# The same cube with one texture square on every face (Wavefront OBJ: f v/vt).
TEXTURED_OBJ = (
    "mtllib box.mtl\n"
    + CUBE_OBJ.split("f ")[0]
    + "vt 0 0\nvt 1 0\nvt 1 1\nvt 0 1\nusemtl wood\n"
    + "".join(
        "f " + " ".join(f"{v}/{t}" for v, t in zip(line.split()[1:], (1, 2, 3, 4), strict=True)) + "\n"
        for line in CUBE_OBJ.splitlines()
        if line.startswith("f ")
    )
)
MTL = "newmtl wood\nKd 1 1 1\nmap_Kd tex/wood.png\n"


def _meshes_dir_is_empty(media_root) -> bool:
    folder = media_root / "assets" / "meshes"
    return not folder.exists() or not any(folder.iterdir())


def test_obj_zip_upload_is_unpacked_beside_its_row(user, team, classes, media_root, no_preview):
    content = _zip_bytes({"box.obj": TEXTURED_OBJ.encode(), "box.mtl": MTL.encode(), "tex/wood.png": _png_bytes()})
    asset = _upload(user, team, content=content, filename="box.zip", look="keep")
    path = media_root / asset.mesh_file.name
    assert path.name == "box.obj" and path.is_file() and (path.parent / "tex" / "wood.png").is_file()
    info = asset_files.asset_info(asset.pk)
    assert info["format"] == "zip" and info["textured_parts"] == 1
    # Nothing hidden stays behind (no partial files or folders).
    assert not [p for p in (media_root / "assets" / "meshes").iterdir() if p.name.startswith(".")]


@pytest.mark.parametrize(
    ("entries", "message"),
    [
        ({"../box.obj": CUBE_OBJ.encode()}, "outside"),
        ({"box.obj": TEXTURED_OBJ.encode(), "box.mtl": MTL.encode()}, "texture 'tex/wood.png' is missing"),
        ({"box.obj": TEXTURED_OBJ.encode()}, "material library 'box.mtl' is missing"),
        ({"box.obj": CUBE_OBJ.encode(), "zeros.bin": bytes(8 * 2**20)}, "zip bomb"),
        ({"notes.txt": b"no model here"}, "exactly one model"),
    ],
)
def test_bad_zips_are_refused_with_a_reason_and_nothing_is_saved(
    user, team, classes, media_root, no_preview, entries, message
):
    with pytest.raises(asset_files.UploadError, match=message):
        _upload(user, team, content=_zip_bytes(entries), filename="model.zip")
    assert not Asset.objects.filter(kind="mesh").exists()
    assert _meshes_dir_is_empty(media_root)
    assert not no_preview


def test_upload_page_shows_the_size_in_metres(client, user, team, classes, media_root, no_preview):
    client.force_login(user)
    response = client.post(
        reverse("campaigns:assets"),
        {
            "name": "box",
            "team": team.pk,
            "object_class": "ottoman",
            "unit": "m",
            "creation_cost": "0",
            "up_axis": "+z",
            "front": "",
            "look": "keep",
            "mesh": SimpleUploadedFile("box.obj", CUBE_OBJ.encode()),
        },
        follow=True,
    )
    assert response.status_code == 200
    text = response.content.decode()
    assert "0.40 × 0.30 × 0.30 m (width × depth × height)" in text


def test_upload_command_prints_the_size_in_metres(user, team, classes, media_root, no_preview, tmp_path):
    from django.core.management import call_command
    from django.core.management.base import CommandError

    path = tmp_path / "cube.obj"
    path.write_text(CUBE_OBJ)
    out = io.StringIO()
    call_command(
        "upload_asset",
        str(path),
        team=team.name,
        object_class="ottoman",
        name="cli cube",
        user="ana",
        unit="m",
        up_axis="+z",
        stdout=out,
    )
    assert "0.40 × 0.30 × 0.30 m (width × depth × height)" in out.getvalue()
    # An absurd size is refused as before (read as millimetres the cube is 0.4 mm across).
    with pytest.raises(CommandError, match="is outside 0.02–10"):
        call_command(
            "upload_asset",
            str(path),
            team=team.name,
            object_class="ottoman",
            name="tiny",
            user="ana",
            unit="mm",
            stdout=io.StringIO(),
        )
    assert list(Asset.objects.filter(kind="mesh").values_list("name", flat=True)) == ["cli cube"]


def test_preview_looks_at_the_models_front(media_root, tmp_path):
    """A plaque modelled lying face-up (red face on file +z, blue body below), up +y, front +z: the preview's
    centre shows the red face. Colours judged by hue only (red channel dominant), lighting aside."""
    import numpy as np
    import trimesh
    from PIL import Image

    face = trimesh.creation.box(extents=(0.3, 0.3, 0.01))
    face.apply_translation((0, 0, 0.055))
    face.visual = trimesh.visual.TextureVisuals(
        material=trimesh.visual.material.PBRMaterial(
            baseColorFactor=[0.8, 0.05, 0.05, 1.0], roughnessFactor=1.0, metallicFactor=0.0
        )
    )
    body = trimesh.creation.box(extents=(0.3, 0.3, 0.05))
    body.apply_translation((0, 0, 0.025))
    body.visual = trimesh.visual.TextureVisuals(
        material=trimesh.visual.material.PBRMaterial(
            baseColorFactor=[0.05, 0.05, 0.8, 1.0], roughnessFactor=1.0, metallicFactor=0.0
        )
    )
    path = tmp_path / "plaque.glb"
    trimesh.Scene([face, body]).export(path)
    centres = {}
    for front in ("+z", "-z"):
        preview = asset_files.render_asset_preview(
            asset_pk=1,
            kind="mesh",
            class_name="wall_clock",
            mesh_path=str(path),
            unit="m",
            up_axis="+y",
            front=front,
            look="keep",
        )
        image = np.asarray(Image.open(preview).convert("RGB"), dtype=float)
        centres[front] = image[54:74, 54:74].reshape(-1, 3).mean(axis=0)
    assert centres["+z"][0] > 2 * centres["+z"][2]  # the red face towards the camera
    assert centres["-z"][2] > 2 * centres["-z"][0]  # told the front is -z, the camera sees the blue back
