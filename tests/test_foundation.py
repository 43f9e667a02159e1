"""Foundation: configuration from the environment, login everywhere, health, and a real worker."""

from __future__ import annotations

import os
import subprocess
import sys
import uuid
from pathlib import Path

import pytest
import yaml
from django.conf import settings
from django.urls import reverse

ROOT = Path(__file__).resolve().parent.parent


pytestmark = pytest.mark.configuration  # every test here checks the configuration in use


def _settings_in_subprocess(env: dict, expr: str) -> str:
    """Evaluate an expression on a fresh settings import with exactly this environment."""
    clean = {
        k: v for k, v in os.environ.items() if not k.startswith(("EVENFRAME_", "DATABASE_URL", "CELERY_", "DJANGO_"))
    }
    clean.update(env)
    code = (
        f"import django, os; os.environ['DJANGO_SETTINGS_MODULE']='evenframe.settings'; django.setup(); "
        f"from django.conf import settings as s; print({expr})"
    )
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=clean, capture_output=True, text=True, timeout=60)
    assert out.returncode == 0, out.stderr
    return out.stdout.strip()


def test_embedded_default_uses_sqlite_wal_and_filesystem_broker():
    out = _settings_in_subprocess(
        {},
        "s.DATABASES['default']['ENGINE'], s.CELERY_BROKER_URL, s.DEBUG, "
        "'WAL' in s.DATABASES['default']['OPTIONS']['init_command']",
    )
    assert out == "django.db.backends.sqlite3 filesystem:// False True"


def test_service_mode_uses_postgres_and_redis():
    env = {
        "DATABASE_URL": "postgres://u:p@db.example:5432/ev",
        "CELERY_BROKER_URL": "redis://cache:6379/0",
        "EVENFRAME_SECRET_KEY": "x" * 60,
    }
    out = _settings_in_subprocess(
        env,
        "s.DATABASES['default']['ENGINE'], s.DATABASES['default']['HOST'], "
        "s.CELERY_BROKER_URL, s.CELERY_RESULT_BACKEND, s.DEBUG",
    )
    assert out == "django.db.backends.postgresql db.example redis://cache:6379/0 redis://cache:6379/0 False"


def test_service_mode_refuses_missing_secret():
    clean = {
        k: v for k, v in os.environ.items() if not k.startswith(("EVENFRAME_", "DATABASE_URL", "CELERY_", "DJANGO_"))
    }
    clean["DATABASE_URL"] = "postgres://u:p@db.example:5432/ev"
    out = subprocess.run(
        [sys.executable, "manage.py", "check"], cwd=ROOT, env=clean, capture_output=True, text=True, timeout=60
    )
    assert out.returncode != 0
    assert "EVENFRAME_SECRET_KEY must be set" in out.stderr


def test_check_deploy_clean_in_service_mode():
    clean = {
        k: v for k, v in os.environ.items() if not k.startswith(("EVENFRAME_", "DATABASE_URL", "CELERY_", "DJANGO_"))
    }
    clean.update(
        {
            "DATABASE_URL": "postgres://u:p@127.0.0.1:1/ev",
            "CELERY_BROKER_URL": "redis://127.0.0.1:1/0",
            "EVENFRAME_SECRET_KEY": "k9$" + uuid.uuid4().hex + uuid.uuid4().hex,
            "EVENFRAME_ALLOWED_HOSTS": "evenframe.example",
        }
    )
    out = subprocess.run(
        [sys.executable, "manage.py", "check", "--deploy", "--fail-level", "WARNING"],
        cwd=ROOT,
        env=clean,
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert out.returncode == 0, out.stdout + out.stderr
    assert "no issues" in out.stdout


def test_bad_boolean_environment_is_a_clear_error():
    clean = {
        k: v for k, v in os.environ.items() if not k.startswith(("EVENFRAME_", "DATABASE_URL", "CELERY_", "DJANGO_"))
    }
    clean["EVENFRAME_DEBUG"] = "maybe"
    out = subprocess.run(
        [sys.executable, "manage.py", "check"], cwd=ROOT, env=clean, capture_output=True, text=True, timeout=60
    )
    assert out.returncode != 0 and "EVENFRAME_DEBUG must be true or false" in out.stderr


def test_docker_compose_names_the_four_services():
    compose = yaml.safe_load((ROOT / "docker-compose.yml").read_text())
    services = compose["services"]
    assert {"web", "worker", "postgres", "redis"} <= set(services)
    for name in ("web", "worker"):
        env = services[name]["environment"]
        assert env["DATABASE_URL"].startswith("postgres://")
        assert env["CELERY_BROKER_URL"].startswith("redis://")
    assert "render_worker" in " ".join(services["worker"]["command"])


@pytest.mark.django_db
@pytest.mark.parametrize("name", ["home", "health", "health-json", "campaigns:list", "admin:index"])
def test_every_page_but_login_requires_login(client, name):
    response = client.get(reverse(name))
    assert response.status_code == 302
    assert response["Location"].startswith(reverse("login")) or "/login/" in response["Location"]


@pytest.mark.django_db
def test_login_page_is_public(client):
    response = client.get(reverse("login"))
    assert response.status_code == 200
    assert b"Sign in" in response.content


@pytest.mark.django_db
def test_media_is_behind_login_team_scoped_and_refuses_traversal(client, django_user_model, tmp_path, settings):
    from assets import services as asset_services
    from campaigns import services
    from teams.models import Membership, Team

    settings.MEDIA_ROOT = tmp_path / "media"
    asset_services.ensure_object_class(name="chair")
    team, other = Team.objects.create(name="Ours"), Team.objects.create(name="Theirs")
    member = django_user_model.objects.create_user("ana", password="pw-123-long")
    outsider = django_user_model.objects.create_user("oz", password="pw-123-long")
    Membership.objects.create(team=team, user=member, role="viewer")
    Membership.objects.create(team=other, user=outsider, role="admin")
    planner = django_user_model.objects.create_user("pia", password="pw-123-long")
    Membership.objects.create(team=team, user=planner, role="planner")
    campaign = services.create_campaign(
        owner=planner,
        team=team,
        name="c",
        cost_budget=10,
        price_per_cpu_hour=1,
        quotas=[services.QuotaInput(class_name="chair", target_accepted=1)],
    )
    frame_dir = tmp_path / "media" / "campaigns" / str(campaign.pk) / "frames" / "0"
    frame_dir.mkdir(parents=True)
    (frame_dir / "rgb.png").write_bytes(b"frame")
    (tmp_path / "media" / "stray.txt").write_text("stray")
    (tmp_path / "secret.txt").write_text("secret")
    url = f"/media/campaigns/{campaign.pk}/frames/0/rgb.png"
    assert client.get(url).status_code == 302  # login first
    client.force_login(outsider)
    assert client.get(url).status_code == 404  # another team's frame: not even its existence
    client.force_login(member)
    assert client.get(url).status_code == 200
    assert client.get("/media/stray.txt").status_code == 404  # outside any team's folders
    assert client.get("/media/../secret.txt").status_code == 404
    assert client.get("/media/%2e%2e/secret.txt").status_code == 404
    assert client.get(f"/media/campaigns/{campaign.pk}/../../../secret.txt").status_code == 404


@pytest.mark.django_db
def test_health_reports_no_worker_as_failing(client, django_user_model):
    client.force_login(django_user_model.objects.create_user("ben", password="pw-123-long"))
    response = client.get(reverse("health-json"))
    body = response.json()
    checks = {c["name"]: c for c in body["checks"]}
    assert set(checks) == {"database", "broker", "workers", "renderer"}
    assert checks["database"]["ok"] is True
    assert checks["broker"]["ok"] is True, checks["broker"]
    assert checks["workers"]["ok"] is False
    assert response.status_code == 503 and body["ok"] is False
    page = client.get(reverse("health"))
    assert page.status_code == 503 and b"failing" in page.content


@pytest.mark.worker
def test_task_runs_in_a_separate_worker_process(render_worker_factory, client, django_user_model):
    """A task sent through the configured broker is executed by another process, which the health page sees."""
    from fleet.tasks import ping

    worker = render_worker_factory(concurrency=1)
    token = uuid.uuid4().hex
    result = ping.delay(token).get(timeout=60)
    assert result["token"] == token
    assert result["pid"] != os.getpid()
    assert result["pid"] != worker.pid  # a prefork pool child of the worker, not its main process either
    client.force_login(django_user_model.objects.create_user("cy", password="pw-123-long"))
    body = client.get(reverse("health-json")).json()
    assert body["ok"] is True, body
    workers_check = next(c for c in body["checks"] if c["name"] == "workers")
    assert worker.name in workers_check["detail"]
    worker.stop()
    from fleet.models import WorkerHeartbeat

    assert WorkerHeartbeat.objects.get(hostname=worker.name).stopped_at is not None


def test_broker_in_use_matches_configuration():
    expected = "redis" if os.environ.get("CELERY_BROKER_URL", "").startswith("redis") else "filesystem"
    assert settings.CELERY_BROKER_URL.startswith(expected)


def test_the_web_process_loads_no_renderer():
    """Importing every page (the URL configuration) loads none of the render core's heavy modules: Mitsuba, Dr.Jit,
    the denoiser, pycocotools, trimesh, or the frame pipeline. A fresh interpreter, so this test process's own
    imports cannot hide one."""
    import subprocess
    import sys

    code = (
        "import os, sys\n"
        "os.environ.setdefault('DJANGO_SETTINGS_MODULE', 'evenframe.settings')\n"
        "import django\n"
        "django.setup()\n"
        "import evenframe.urls\n"
        "heavy = ('render.frame', 'render.scene', 'render.labels', 'mitsuba', 'drjit', 'oidn', 'pycocotools', 'trimesh')\n"
        "print(','.join(m for m in heavy if m in sys.modules))\n"
    )
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120, check=True)
    assert result.stdout.strip() == "", result.stdout
