"""``manage.py bench_estimate`` runs its three plans to completion on the real render task and prints, per plan, the
estimate beside what the run measured (the figures themselves are the benchmark's, not asserted here)."""

from __future__ import annotations

import re

import pytest
from django.core.management import call_command

from campaigns.models import Campaign

pytestmark = pytest.mark.django_db(transaction=True)


def test_bench_prints_estimate_and_actual_for_three_completed_campaigns(media_root, capsys):
    call_command("bench_estimate", "--scale", "0.2", "--width", "48", "--height", "36", "--spp", "2")
    out = capsys.readouterr().out
    assert len(re.findall(r"^campaign \d \(.*\): completed, \d+ frames", out, re.M)) == 3, out
    rows = re.findall(r"^(\d)\s+(constant|history)\s+(\d+)/(\d+) ×", out, re.M)
    assert [r[0] for r in rows] == ["1", "2", "3"] and rows[0][1] == "constant"
    done = [int(n) for n in re.findall(r": completed, (\d+) frames", out)]
    assert [int(r[3]) for r in rows] == done  # the actual column is what each run rendered
    assert re.search(r"goal: every estimate within ±15% of the actual: \d of 9 figures", out)
    assert not Campaign.objects.exists()  # the bench cleans up after itself
