"""Everything that writes the asset library: object classes, the shared procedural assets, a team's uploads.

Keyword-only, type-annotated; views and commands call these. Input errors are :class:`AssetError` (structured:
field → message, like every service's); a file that cannot become an asset is :class:`assets.files.UploadError`.
An asset's name is unique in its team and class; it is checked first, for a clear message, and the insert is
guarded as well (:func:`evenframe.inputs.name_guard`), so a request that loses a race for the name gets the check's
own error, never an ``IntegrityError``.
"""

from __future__ import annotations

import logging
import os
from dataclasses import dataclass
from decimal import Decimal
from typing import Any

from django.conf import settings
from django.db import transaction
from django.db.models import Q

from assets import files
from assets.models import Asset, ObjectClass
from evenframe.inputs import InputError, clean_amount, clean_name, name_guard
from teams.permissions import PLANNER, has_role

log = logging.getLogger("evenframe.assets")


class AssetError(InputError):
    """Bad input for the asset library (``field``: the service's keyword, e.g. ``name``, ``object_class``, ``team``);
    nothing was changed."""


def ensure_object_class(*, name: str, label: str = "", description: str = "") -> ObjectClass:
    obj, _ = ObjectClass.objects.get_or_create(
        name=name, defaults={"label": label or name.replace("_", " "), "description": description}
    )
    return obj


def ensure_procedural_asset(*, object_class: ObjectClass, name: str, creation_cost: Decimal | float | str = 0) -> Asset:
    """The shared (team-less) procedural asset of this class and name, created once.

    Only the shared library is looked at: a team's upload with the same name is another asset and is never
    returned here (names are unique per team, and the shared library is its own namespace)."""
    cost = clean_amount(creation_cost, "creation_cost", error=AssetError)
    asset, _ = Asset.objects.get_or_create(
        object_class=object_class,
        name=name,
        team=None,
        defaults={"kind": Asset.Kind.PROCEDURAL, "generator": object_class.name, "creation_cost": cost},
    )
    return asset


ASSET_NAME_MAX_CHARS = 128  # Asset.name's max_length


def _article(word: str) -> str:
    return "an" if word[:1] and word[:1].lower() in "aeiou" else "a"


def _asset_name_conflict(*, team: Any, object_class: ObjectClass, name: str) -> AssetError | None:
    """The error for a name a team cannot give an upload of this class, or None when the name is free.

    Taken when the team already has an asset of that class and name, or when the shared library has one with the
    same name up to letter case (a team upload would shadow it confusingly in the library and the planner). Only
    the team's own assets and the shared library are looked at, so the answer never depends on another team's
    assets and the message never mentions them.
    """
    owners = set(
        Asset.objects.filter(object_class=object_class)
        .filter(Q(team=team, name=name) | Q(team__isnull=True, name__iexact=name))
        .values_list("team_id", flat=True)
    )
    what = f"{_article(object_class.name)} {object_class.name} asset called {name!r}"
    if team.pk in owners:
        return AssetError(f"team {team} already has {what}", field="name")
    if None in owners:
        return AssetError(
            f"the shared library already has {what}; choose another name so the two are not confused", field="name"
        )
    return None


@dataclass(frozen=True)
class _AssetInput:
    team: Any
    object_class: ObjectClass
    name: str
    unit: str
    creation_cost: Decimal
    up_axis: str = "+z"
    front: str = ""
    look: str = "randomize"


def _clean_asset_input(
    *,
    user: Any,
    team: Any,
    object_class_name: str,
    name: Any,
    unit: str,
    creation_cost: Decimal | float | str,
    up_axis: str = "+z",
    front: str = "",
    look: str = "randomize",
) -> _AssetInput:
    """Every check of an upload that needs no file, the name's availability last."""
    # deferred: keeps render.meshes (trimesh) out of Django start-up
    from render.meshes import FRONT_AXES, UNIT_TO_M, UP_AXES, axis_rotation
    from render.user_materials import LOOKS  # deferred: keeps the render core out of Django start-up

    if not has_role(user=user, team=team, role=PLANNER):
        raise AssetError(f"{user} is not a planner in team {team}", field="team")
    name = clean_name(name, max_length=ASSET_NAME_MAX_CHARS, error=AssetError)
    if unit != "auto" and unit not in UNIT_TO_M:
        raise AssetError(f"unknown unit {unit!r} (known: auto, {', '.join(UNIT_TO_M)})", field="unit")
    if up_axis not in UP_AXES:
        raise AssetError(f"unknown up axis {up_axis!r} (known: {', '.join(UP_AXES)})", field="up_axis")
    if front and front not in FRONT_AXES:
        raise AssetError(f"unknown front {front!r} (known: {', '.join(FRONT_AXES)})", field="front")
    try:
        axis_rotation(up_axis, front or None)
    except ValueError as exc:
        raise AssetError(str(exc), field="front") from exc
    if look not in LOOKS:
        raise AssetError(f"unknown look {look!r} (known: {', '.join(LOOKS)})", field="look")
    try:
        object_class = ObjectClass.objects.get(name=object_class_name)
    except (ObjectClass.DoesNotExist, ValueError, TypeError) as exc:
        raise AssetError(f"unknown object class {object_class_name!r}", field="object_class") from exc
    cost = clean_amount(creation_cost, "creation_cost", error=AssetError)
    if conflict := _asset_name_conflict(team=team, object_class=object_class, name=name):
        raise conflict
    return _AssetInput(team, object_class, name, unit, cost, up_axis, front or "", look)


def _insert_asset(*, clean: _AssetInput, mesh_path: str) -> Asset:
    """The asset row; a team asset with this class and name made meanwhile gives the name check's error."""
    with name_guard(lambda: _asset_name_conflict(team=clean.team, object_class=clean.object_class, name=clean.name)):
        return Asset.objects.create(
            object_class=clean.object_class,
            name=clean.name,
            kind=Asset.Kind.MESH,
            mesh_file=mesh_path,
            mesh_unit=clean.unit,
            team=clean.team,
            creation_cost=clean.creation_cost,
            up_axis=clean.up_axis,
            front=clean.front,
            look=clean.look,
        )


@transaction.atomic
def upload_asset(
    *,
    user: Any,
    team: Any,
    object_class_name: str,
    name: str,
    mesh_path: str,
    original_name: str,
    unit: str = "auto",
    creation_cost: Decimal | float | str = 0,
) -> Asset:
    """Add a mesh that is already checked and stored (``mesh_path``: relative to MEDIA_ROOT) to a team's library.

    The dashboard's upload goes through :func:`upload_mesh_asset`, which checks and stores the file itself."""
    clean = _clean_asset_input(
        user=user, team=team, object_class_name=object_class_name, name=name, unit=unit, creation_cost=creation_cost
    )
    return _insert_asset(clean=clean, mesh_path=mesh_path)


def upload_mesh_asset(
    *,
    user: Any,
    team: Any,
    object_class_name: str,
    name: str,
    upload: Any,
    unit: str = "auto",
    creation_cost: Decimal | float | str = 0,
    up_axis: str = "+z",
    front: str = "",
    look: str = "keep",
) -> Asset:
    """Check an uploaded model, store it and add it to a team's library; on any failure nothing stays.

    ``upload`` is a Django ``UploadedFile`` (``name``, ``size``, ``chunks()``): an OBJ, PLY, STL or GLB file, or a
    ``.zip`` holding one OBJ with its MTL and images (or a glTF with its buffers and images). ``up_axis`` and
    ``front`` are the file axes pointing up and towards the model's front (``render.meshes.axis_rotation``);
    ``look`` "keep" renders the file's materials and textures, "randomize" random colours. Order: the checks that
    need no file (role, name, class, cost, orientation, the name free in the team and the shared library), then the
    file is staged beside its final place (a zip unpacked into a hidden folder, refusing path traversal and zip
    bombs) and parsed in a limited child process (:mod:`assets.files`: scale, faces, missing MTL or
    texture files), then the row is inserted and the file (or folder) renamed into place in one transaction. A
    request that loses the race for the name, a model that does not parse or any other failure removes what was
    staged, so no model without a row is left in MEDIA_ROOT. Raises :class:`AssetError` (input) or
    :class:`campaigns.files.UploadError` (the file). Its ``info.json`` records the normalized size in metres.
    Uploads join no campaign by themselves: a campaign chooses them (``campaigns.services.create_campaign``).
    Must not run inside a transaction (the row must be committed before the file counts as kept).
    """
    clean = _clean_asset_input(
        user=user,
        team=team,
        object_class_name=object_class_name,
        name=name,
        unit=unit,
        creation_cost=creation_cost,
        up_axis=up_axis,
        front=front,
        look=look,
    )
    staged = files.stage_upload(upload)
    try:
        if staged.kind == "zip":
            staged = files.unpack_staged_zip(staged)
        info = files.check_mesh_file(path=staged.model_path, unit=clean.unit, up_axis=clean.up_axis, front=clean.front)
        try:
            with transaction.atomic(durable=True):
                asset = _insert_asset(
                    clean=clean, mesh_path=str(staged.final_model_path.relative_to(settings.MEDIA_ROOT))
                )
                try:
                    os.replace(staged.path, staged.final)
                except OSError as exc:
                    raise files.UploadError(
                        f"the file could not be stored ({exc.strerror or exc}); nothing was kept."
                    ) from exc
        except BaseException:
            files.remove_path(staged.final)  # renamed, but the row did not commit
            raise
    finally:
        files.discard(staged)
    try:
        files.write_asset_info(
            asset.pk,
            {
                **info,
                "format": staged.kind.removesuffix("-dir"),
                "original_name": str(getattr(upload, "name", ""))[:200],
            },
        )
    except OSError:  # the asset is kept; its preview render writes the extents again
        log.warning("asset %s: could not write info.json", asset.pk, exc_info=True)
    files.request_preview(asset_pk=asset.pk)
    return asset
