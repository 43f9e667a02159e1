"""Asset names belong to a team: unique per team and class, the shared library its own namespace.

One team's names never block another team's uploads, and no message answering a team's request mentions another
team or its assets. A team cannot take the name of a shared library asset (up to letter case), which would be
two different assets under one name in its library and planner.
"""

from __future__ import annotations

from decimal import Decimal

import pytest
from django.core.files.uploadedfile import SimpleUploadedFile
from django.db import IntegrityError, transaction
from django.urls import reverse

from tests.security.test_concurrency import CUBE_OBJ, World, _make_world, _mesh_files

pytestmark = pytest.mark.django_db


@pytest.fixture
def world(db, django_user_model) -> World:
    return _make_world(django_user_model)


@pytest.fixture
def no_preview(monkeypatch) -> None:
    monkeypatch.setattr("assets.files.request_preview", lambda **kw: None)


def _upload(client, team, name: str, *, object_class: str = "ottoman"):
    return client.post(
        reverse("campaigns:assets"),
        {
            "name": name,
            "team": team.pk,
            "object_class": object_class,
            "unit": "m",
            "creation_cost": "3",
            "mesh": SimpleUploadedFile("box.obj", CUBE_OBJ),
        },
    )


def _text(response) -> str:
    return response.content.decode()


def test_two_teams_may_give_assets_of_one_class_the_same_name(client, world, media_root, no_preview):
    from assets.models import Asset

    client.force_login(world.planner)
    assert _upload(client, world.team, "pouf").status_code == 302
    client.force_login(world.outsider)
    theirs = _upload(client, world.other_team, "pouf")
    assert theirs.status_code == 302, theirs.context["form"].errors
    assert sorted(Asset.objects.filter(name="pouf").values_list("team__name", flat=True)) == [
        "Elsewhere Ltd",
        "Studio North",
    ]
    assert len(_mesh_files(media_root)) == 2


def test_a_taken_name_is_refused_in_the_team_with_a_message_about_that_team_only(client, world, media_root, no_preview):
    from assets.models import Asset

    client.force_login(world.planner)
    assert _upload(client, world.team, "pouf").status_code == 302
    client.force_login(world.outsider)
    assert _upload(client, world.other_team, "pouf").status_code == 302
    again = _upload(client, world.other_team, "pouf")
    assert again.status_code == 400
    assert again.context["form"].errors["name"] == ["team Elsewhere Ltd already has an ottoman asset called 'pouf'"]
    page = _text(again)
    assert "Studio North" not in page and "pia" not in page
    assert Asset.objects.filter(name="pouf").count() == 2
    assert len(_mesh_files(media_root)) == 2  # the refused upload kept no file


def test_another_teams_names_never_show_in_an_upload_answer(client, world, media_root, no_preview):
    """Whatever name an outsider tries, the answer is the same as if the other team had no assets."""
    client.force_login(world.planner)
    for name in ("secret prototype", "pouf"):
        assert _upload(client, world.team, name).status_code == 302
    client.force_login(world.outsider)
    for name in ("secret prototype", "pouf", "Pouf"):
        response = _upload(client, world.other_team, name)
        assert response.status_code == 302, (name, response.context["form"].errors)
        listing = _text(client.get(reverse("campaigns:assets")))
        assert "Studio North" not in listing


def test_a_team_upload_cannot_take_a_shared_asset_name(client, world, media_root, no_preview):
    from assets.models import Asset

    client.force_login(world.planner)
    for name in ("procedural ottoman", "Procedural Ottoman"):
        response = _upload(client, world.team, name)
        assert response.status_code == 400
        message = response.context["form"].errors["name"][0]
        assert message.startswith("the shared library already has an ottoman asset called"), message
        assert "Studio North" not in message and "Elsewhere" not in message
    assert not Asset.objects.filter(kind=Asset.Kind.MESH).exists()
    assert _mesh_files(media_root) == []
    # The same name in another class is free: names are per class.
    assert _upload(client, world.team, "procedural ottoman", object_class="chair").status_code == 302


def test_the_database_keeps_names_unique_per_team_and_class(world):
    from assets.models import Asset, ObjectClass

    ottoman = ObjectClass.objects.get(name="ottoman")

    def add(name: str, team) -> None:
        with transaction.atomic():
            Asset.objects.create(
                object_class=ottoman, name=name, kind=Asset.Kind.MESH, team=team, mesh_file=f"assets/meshes/{name}.obj"
            )

    add("stool", world.team)
    add("stool", world.other_team)
    with pytest.raises(IntegrityError):
        add("stool", world.team)
    add("stool", None)  # the shared namespace is separate (the service refuses team uploads over it)
    with pytest.raises(IntegrityError):
        add("stool", None)
    assert Asset.objects.filter(name="stool").count() == 3


def test_the_shared_library_lookup_never_returns_a_team_upload(world):
    from assets import services as asset_services
    from assets.models import Asset, ObjectClass

    chair = ObjectClass.objects.get(name="chair")
    mesh = asset_services.upload_asset(
        user=world.planner,
        team=world.team,
        object_class_name="chair",
        name="studio chair",
        mesh_path="assets/meshes/studio-chair.obj",
        original_name="studio chair.obj",
        unit="m",
    )
    shared = asset_services.ensure_procedural_asset(object_class=chair, name="studio chair", creation_cost="1")
    assert shared.pk != mesh.pk
    assert shared.team_id is None and shared.kind == Asset.Kind.PROCEDURAL
    assert asset_services.ensure_procedural_asset(object_class=chair, name="studio chair").pk == shared.pk


@pytest.mark.django_db(transaction=True)
def test_the_migration_keeps_existing_assets_and_frees_names_across_teams(django_user_model):
    """Rows valid under the old rule (unique per class across teams) stay, unchanged, under the new one."""
    from django.db import connection
    from django.db.migrations.executor import MigrationExecutor

    before, after = (
        ("campaigns", "0003_quota_min_contrast_instance_contrast"),
        ("campaigns", "0004_asset_name_unique_per_team"),
    )
    executor = MigrationExecutor(connection)
    executor.migrate([before])
    try:
        old = executor.loader.project_state([before]).apps
        team_a = old.get_model("teams", "Team").objects.create(name="A")
        team_b = old.get_model("teams", "Team").objects.create(name="B")
        oc = old.get_model("campaigns", "ObjectClass").objects.create(name="ottoman")
        asset_model = old.get_model("campaigns", "Asset")
        rows = [
            asset_model.objects.create(object_class=oc, name=name, team=team, kind=kind, creation_cost=Decimal("1"))
            for name, team, kind in (
                ("procedural ottoman", None, "procedural"),
                ("pouf", team_a, "mesh"),
                ("stool", team_b, "mesh"),
            )
        ]
        with pytest.raises(IntegrityError), transaction.atomic():  # the old rule: one name per class, every team
            asset_model.objects.create(object_class=oc, name="pouf", team=team_b, kind="mesh")

        executor = MigrationExecutor(connection)
        executor.migrate([after])
        new = executor.loader.project_state([after]).apps.get_model("campaigns", "Asset")
        assert sorted(new.objects.values_list("pk", "name", "team_id")) == sorted(
            (r.pk, r.name, r.team_id) for r in rows
        )
        new.objects.create(object_class_id=oc.pk, name="pouf", team_id=team_b.pk, kind="mesh")
        with pytest.raises(IntegrityError), transaction.atomic():
            new.objects.create(object_class_id=oc.pk, name="pouf", team_id=team_b.pk, kind="mesh")
    finally:  # back to the latest state for the tests that follow
        executor = MigrationExecutor(connection)
        executor.migrate(executor.loader.graph.leaf_nodes())


def test_files_of_refused_uploads_never_stay(client, world, media_root, no_preview):
    """Every refused upload (taken name, shared name, bad content) leaves the meshes folder as it was."""
    client.force_login(world.planner)
    assert _upload(client, world.team, "pouf").status_code == 302
    kept = _mesh_files(media_root)
    assert len(kept) == 1
    assert _upload(client, world.team, "pouf").status_code == 400
    assert _upload(client, world.team, "procedural ottoman").status_code == 400
    bad = client.post(
        reverse("campaigns:assets"),
        {
            "name": "noise",
            "team": world.team.pk,
            "object_class": "ottoman",
            "unit": "m",
            "creation_cost": "3",
            "mesh": SimpleUploadedFile("noise.obj", b"\x89PNG\r\n\x1a\n" + bytes(range(256)) * 4),
        },
    )
    assert bad.status_code == 400 and "not a mesh file" in bad.context["form"].errors["mesh"][0]
    assert _mesh_files(media_root) == kept
