"""``manage.py bench_soak --workers 2 --frames 200``: a campaign under random faults, then a full recount.

Faults injected at random (seeded):

* kill -9 of a whole worker (main process and pool) at random times, a new worker started in its place;
* crash frames: the render core raises on them every time (they must end dead after their attempts);
* abort frames: the render process aborts (SIGABRT, like a segfault) every time (dead after their attempts);
* transient errors: an attempt fails with the given probability (retried with backoff).

When the campaign has ``--frames`` done frames it is cancelled; the frames still running finish and are
recorded. The command prints frames done, retries, dead frames, lost frames (must be 0: every frame ends
done, dead or revoked, and every done frame has all its files) and double-counted instances (must be 0:
counters equal a recount from the rows, no frame is recorded twice). Exit status 1 if either is not 0.

It runs against the configured database and broker, with its own data folder (media, and the file-system
broker's folders in the embedded default — there, a private SQLite database too), so a running demo is not
touched. With Redis, workers of another fleet on the same broker would take its messages: run it on a
broker database of its own (``CELERY_BROKER_URL=redis://…/13``).
"""

from __future__ import annotations

import json
import os
import random
import signal
import subprocess
import sys
import tempfile
import time
import uuid
from decimal import Decimal
from pathlib import Path

from django.conf import settings
from django.core.management import call_command
from django.core.management.base import BaseCommand, CommandParser
from django.db.models import Count, Sum

from assets import services as asset_services
from campaigns import integrity, services
from campaigns.models import Campaign, Frame, FrameEvent
from evenframe.celery import ensure_broker_folders
from fleet.models import WorkerHeartbeat

CHILD_ENV = "EVENFRAME_SOAK_DATA_DIR"
ROOT = Path(__file__).resolve().parents[3]
SOAK_CLASSES = ("chair", "ottoman", "side_table", "wall_clock")


class Worker:
    def __init__(self, proc: subprocess.Popen, name: str, log_path: Path) -> None:
        self.proc, self.name, self.log_path = proc, name, log_path

    def kill(self) -> None:
        if self.proc.poll() is None:
            os.killpg(self.proc.pid, signal.SIGKILL)
            self.proc.wait(10)

    def stop(self) -> None:
        if self.proc.poll() is None:
            os.killpg(self.proc.pid, signal.SIGTERM)
            try:
                self.proc.wait(30)
            except subprocess.TimeoutExpired:
                self.kill()


class Command(BaseCommand):
    help = "Soak test: render a campaign while killing workers and injecting renderer faults; then recount."

    def add_arguments(self, parser: CommandParser) -> None:
        parser.add_argument("--workers", type=int, default=2)
        parser.add_argument("--concurrency", type=int, default=1, help="Frames at once per worker")
        parser.add_argument("--frames", type=int, default=200, help="Done frames after which the campaign stops")
        parser.add_argument("--width", type=int, default=64)
        parser.add_argument("--height", type=int, default=48)
        parser.add_argument("--spp", type=int, default=2)
        parser.add_argument(
            "--kill-interval-s",
            type=float,
            default=20.0,
            help="Mean time between kill -9 of a random worker (exponential); 0 = no kills",
        )
        parser.add_argument("--crash-fraction", type=float, default=0.02, help="Share of frames that always raise")
        parser.add_argument("--abort-fraction", type=float, default=0.01, help="Share of frames that always abort")
        parser.add_argument("--transient-p", type=float, default=0.05, help="Probability an attempt fails once")
        parser.add_argument("--max-attempts", type=int, default=3)
        parser.add_argument("--seed", type=int, default=1)
        parser.add_argument("--timeout-s", type=float, default=1800.0)
        parser.add_argument("--data-dir", default="", help="Private data folder (default: a new temporary one)")

    def handle(self, *args, **options) -> None:
        if not os.environ.get(CHILD_ENV):
            return self._reexec(options)
        code = self._run(options)
        if code:
            sys.exit(code)

    # The settings (data folder, embedded SQLite path, broker folders) are read at start, so the private data
    # folder needs a fresh process.
    def _reexec(self, options: dict) -> None:
        data_dir = options["data_dir"] or tempfile.mkdtemp(prefix="evenframe-soak-")
        env = {
            **os.environ,
            "EVENFRAME_DATA_DIR": data_dir,
            CHILD_ENV: data_dir,
            "EVENFRAME_MEDIA_ROOT": str(Path(data_dir) / "media"),
        }
        argv = [sys.executable, str(ROOT / "manage.py"), "bench_soak", *sys.argv[2:]]
        self.stdout.write(f"soak: private data folder {data_dir}")
        sys.stdout.flush()
        sys.exit(subprocess.call(argv, env=env, cwd=ROOT))

    def _start_worker(self, *, index: int, options: dict, faults: dict, log_dir: Path) -> Worker:
        from django.db import connection

        name = f"soak{index}-{uuid.uuid4().hex[:6]}@{os.uname().nodename}"
        env = {
            **os.environ,
            "EVENFRAME_WORKER_HEARTBEAT_S": "1",
            "EVENFRAME_WORKER_LIVE_WINDOW_S": "6",
            "EVENFRAME_WORKER_SWEEP_S": "2",
            "EVENFRAME_STALE_QUEUED_S": "60",
            "EVENFRAME_FAULTS": json.dumps(faults),
            "PYTHONUNBUFFERED": "1",
        }
        if connection.vendor == "sqlite":
            env["DATABASE_URL"] = f"sqlite:///{Path(connection.settings_dict['NAME']).resolve()}"
        log_path = log_dir / f"{name.split('@')[0]}.log"
        proc = subprocess.Popen(
            [
                sys.executable,
                str(ROOT / "manage.py"),
                "render_worker",
                f"--concurrency={options['concurrency']}",
                "--threads=1",
                f"--name={name}",
                "--loglevel=INFO",
            ],
            cwd=ROOT,
            env=env,
            stdout=open(log_path, "wb"),
            stderr=subprocess.STDOUT,
            start_new_session=True,
        )
        return Worker(proc, name, log_path)

    def _wait_live(self, workers: list[Worker], timeout_s: float = 120) -> None:
        deadline = time.monotonic() + timeout_s
        names = {w.name for w in workers}
        while time.monotonic() < deadline:
            if WorkerHeartbeat.objects.filter(hostname__in=names, stopped_at__isnull=True).count() == len(names):
                return
            time.sleep(0.2)
        raise RuntimeError(f"workers not live after {timeout_s} s: see logs in {workers[0].log_path.parent}")

    def _run(self, options: dict) -> int:
        from django.contrib.auth import get_user_model

        call_command("migrate", verbosity=0)
        ensure_broker_folders()
        data_dir = Path(os.environ[CHILD_ENV])
        log_dir = data_dir / "logs"
        log_dir.mkdir(parents=True, exist_ok=True)
        rng = random.Random(options["seed"])
        frames_wanted = options["frames"]
        # Frame indices reach about frames + dead + in flight; draw the bad ones from a range that covers it.
        index_range = range(int(frames_wanted * 1.3) + 10)
        crash = sorted(i for i in index_range if rng.random() < options["crash_fraction"])
        abort = sorted(i for i in index_range if i not in crash and rng.random() < options["abort_fraction"])
        faults = {
            "crash_frames": crash,
            "abort_frames": abort,
            "transient_p": options["transient_p"],
            "seed": options["seed"],
        }

        user, _ = get_user_model().objects.get_or_create(username="soak")
        for name in SOAK_CLASSES:
            oc = asset_services.ensure_object_class(name=name)
            asset_services.ensure_procedural_asset(object_class=oc, name=f"procedural {name}")
        campaign = services.create_campaign(
            owner=user,
            name=f"soak {time.strftime('%Y-%m-%d %H:%M:%S')} {uuid.uuid4().hex[:4]}",
            quotas=[services.QuotaInput(name, 1_000_000) for name in SOAK_CLASSES],
            budget={
                "render": {
                    "width_px": options["width"],
                    "height_px": options["height"],
                    "spp": options["spp"],
                    "max_depth": 3,
                },
                "room": {"width_m": [3.0, 3.5], "depth_m": [3.0, 3.5], "max_objects_per_m2": 0.5},
                "thresholds": {"min_visible_fraction": 0.2, "min_box_px": 3.0},
                "variation": {"layouts": 1_000_000, "lighting_per_layout": 1, "views_per_lighting": 1},
            },
            cost_budget=Decimal("1000000"),
            price_per_cpu_hour=Decimal("0.05"),
            seed=options["seed"],
            max_attempts=options["max_attempts"],
        )
        self.stdout.write(
            f"soak: campaign {campaign.pk}, {options['workers']} worker(s) × {options['concurrency']}, "
            f"{options['width']}×{options['height']} px, {options['spp']} spp; crash frames {crash}, "
            f"abort frames {abort}, transient p {options['transient_p']}, "
            f"kill every ~{options['kill_interval_s']} s"
        )
        sys.stdout.flush()

        started = 0
        workers: list[Worker] = []
        for _ in range(options["workers"]):
            workers.append(self._start_worker(index=started, options=options, faults=faults, log_dir=log_dir))
            started += 1
        kills, interrupted = 0, 0
        t0 = time.monotonic()
        try:
            self._wait_live(workers)
            services.start_campaign(campaign_id=campaign.pk)
            next_kill = (
                t0 + rng.expovariate(1 / options["kill_interval_s"]) if options["kill_interval_s"] > 0 else float("inf")
            )
            last_report = t0
            while True:
                now = time.monotonic()
                campaign.refresh_from_db()
                if campaign.frames_done >= frames_wanted or campaign.status != Campaign.Status.RUNNING:
                    break
                if now - t0 > options["timeout_s"]:
                    self.stderr.write(f"soak: timed out after {options['timeout_s']} s")
                    break
                if now >= next_kill:
                    victim = rng.randrange(len(workers))
                    interrupted += Frame.objects.filter(
                        campaign=campaign, state="running", worker_host=workers[victim].name
                    ).count()
                    workers[victim].kill()
                    kills += 1
                    workers[victim] = self._start_worker(index=started, options=options, faults=faults, log_dir=log_dir)
                    started += 1
                    next_kill = now + rng.expovariate(1 / options["kill_interval_s"])
                if now - last_report >= 15:
                    last_report = now
                    self.stdout.write(
                        f"  {now - t0:6.0f} s: {campaign.frames_done} done, {campaign.frames_dead} "
                        f"dead, {kills} kill(s)"
                    )
                    sys.stdout.flush()
                time.sleep(0.25)
            if campaign.status == Campaign.Status.RUNNING:
                services.cancel_campaign(campaign_id=campaign.pk)
            # Running frames finish and are recorded; frames of killed workers are revoked by the sweep.
            deadline = time.monotonic() + 120
            while (
                time.monotonic() < deadline
                and Frame.objects.filter(campaign=campaign, state__in=("queued", "running")).exists()
            ):
                time.sleep(0.5)
            elapsed_s = time.monotonic() - t0
        finally:
            for worker in workers:
                worker.stop()

        campaign.refresh_from_db()
        frames = Frame.objects.filter(campaign=campaign)
        states = dict(frames.order_by().values_list("state").annotate(n=Count("pk")).values_list("state", "n"))
        retries = (frames.aggregate(a=Sum("attempts"))["a"] or 0) - frames.filter(attempts__gt=0).count()
        check = integrity.recount(campaign=campaign)
        unsettled = frames.exclude(state__in=("done", "dead", "revoked")).count()
        missing = integrity.missing_frame_files(campaign=campaign, media_root=Path(settings.MEDIA_ROOT))
        lost = unsettled + len(missing)
        instance_keys = [k for k in check.stored if k.endswith((".accepted", ".rejected"))]
        over = sum(max(0, int(check.stored[k]) - int(check.counted[k])) for k in instance_keys)
        done_instances = frames.filter(state="done").annotate(n=Count("instances")).values_list("n", flat=True)
        double = over + check.stray_instances + (sum(done_instances) if check.double_counted_frames else 0)
        dead = frames.filter(state="dead")
        dead_why = {
            "injected crash": dead.filter(error__contains="InjectedRenderCrash").count(),
            "aborted process": dead.filter(index__in=abort).count(),
            "transient × attempts": dead.filter(error__contains="InjectedTransientError").count(),
        }
        dead_why["worker lost (kill -9)"] = dead.count() - sum(dead_why.values())
        swept = FrameEvent.objects.filter(
            campaign=campaign, from_state="running", to_state="queued", detail__contains="no heartbeat"
        ).count()
        redelivered = FrameEvent.objects.filter(
            campaign=campaign, to_state="running", detail__contains="redelivered"
        ).count()
        lines = [
            f"soak finished in {elapsed_s:.0f} s ({campaign.frames_done / max(elapsed_s, 1e-9) * 60:.1f} frames/min)",
            f"  frames done              {campaign.frames_done}",
            f"  retries                  {retries}  (attempts beyond the first; {swept} frames taken back from "
            f"killed workers, {redelivered} redelivered messages)",
            f"  dead frames              {campaign.frames_dead}  "
            + ", ".join(f"{k}: {v}" for k, v in dead_why.items()),
            f"  worker kills (kill -9)   {kills}  ({interrupted} frame(s) running at the kill)",
            f"  frame states             {dict(sorted(states.items()))}",
            f"  lost frames              {lost}  (unsettled {unsettled}, done without all files {len(missing)})",
            f"  double-counted instances {double}",
            f"  counters = recount       {'yes' if check.ok else f'NO: {check.mismatches}'}",
            f"  instances                {campaign.instances_accepted} accepted, {campaign.instances_rejected} "
            "rejected",
            f"  logs                     {log_dir}",
        ]
        self.stdout.write("\n".join(lines))
        return 1 if lost or double or not check.ok else 0
