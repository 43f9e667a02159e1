"""``manage.py upload_asset FILE --team T --class C --name N --user U``: add a model to a team's library.

The same checks and storage as the dashboard's upload (``assets.services.upload_mesh_asset``): OBJ, PLY, STL,
GLB, or a .zip with an OBJ and its MTL and images (or a glTF and its files); up axis, front and look per asset.
Prints the normalized size in metres. The upload joins no campaign by itself.
"""

from __future__ import annotations

from pathlib import Path

from django.core.files import File
from django.core.management.base import BaseCommand, CommandError, CommandParser

from assets import files, services
from render.meshes import FRONT_AXES, SIGNED_AXES, UNIT_TO_M
from render.user_materials import LOOKS
from teams.models import Team


class Command(BaseCommand):
    help = "Check a model file and add it to a team's asset library (like the dashboard's upload)."

    def add_arguments(self, parser: CommandParser) -> None:
        parser.add_argument("file", help="OBJ, PLY, STL, GLB, or a .zip with one OBJ/glTF and its files")
        parser.add_argument("--team", required=True, help="Team name")
        parser.add_argument("--class", dest="object_class", required=True, help="Object class, e.g. wall_clock")
        parser.add_argument("--name", required=True, help="Asset name (unique in the team and class)")
        parser.add_argument("--user", required=True, help="User name of a planner of the team")
        parser.add_argument("--unit", default="auto", choices=["auto", *UNIT_TO_M], help="File unit (default auto)")
        parser.add_argument(
            "--up-axis",
            default="+z",
            choices=list(SIGNED_AXES),
            help="File axis pointing up (default +z; glTF files are usually +y)",
        )
        parser.add_argument(
            "--front",
            default="",
            choices=["", *FRONT_AXES],
            help="File axis the model's front faces (default: +y for a z-up file, +z for y-up)",
        )
        parser.add_argument(
            "--look",
            default="keep",
            choices=list(LOOKS),
            help="keep the model's materials (default) or randomize its colours",
        )
        parser.add_argument("--cost", default="0", help="Creation cost (modelling, licensing)")

    def handle(self, *args, **options) -> None:
        from django.contrib.auth import get_user_model

        path = Path(options["file"])
        if not path.is_file():
            raise CommandError(f"{path}: no such file")
        team = Team.objects.filter(name=options["team"]).first()
        if team is None:
            raise CommandError(f"no team named {options['team']!r}")
        user = get_user_model().objects.filter(username=options["user"]).first()
        if user is None:
            raise CommandError(f"no user named {options['user']!r}")
        with open(path, "rb") as handle:
            upload = File(handle, name=path.name)
            try:
                asset = services.upload_mesh_asset(
                    user=user,
                    team=team,
                    object_class_name=options["object_class"],
                    name=options["name"],
                    upload=upload,
                    unit=options["unit"],
                    creation_cost=options["cost"],
                    up_axis=options["up_axis"],
                    front=options["front"],
                    look=options["look"],
                )
            except (files.UploadError, services.AssetError) as exc:
                raise CommandError(f"{path.name}: {exc}") from exc
        info = files.asset_info(asset.pk)
        size = files.size_text(info["extents_m"]) if info.get("extents_m") else "unknown size"
        self.stdout.write(
            f"asset {asset.pk} {asset}: {size}, unit {info.get('unit', asset.mesh_unit)}, "
            f"{info.get('parts', 1)} part(s), {info.get('textured_parts', 0)} textured, "
            f"look {asset.look}; campaigns use it only where they choose it"
        )
