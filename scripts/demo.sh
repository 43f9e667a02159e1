#!/usr/bin/env bash
# Bring up the embedded demo: migrate, demo user, demo data, web server and one render worker.
# Ctrl-C stops both.
set -euo pipefail
cd "$(dirname "$0")/.."
started=$(date +%s)
PY=.venv/bin/python
export EVENFRAME_DEBUG=${EVENFRAME_DEBUG:-1}
HOST=${EVENFRAME_DEMO_HOST:-127.0.0.1}
PORT=${EVENFRAME_DEMO_PORT:-8000}
LOGS=${EVENFRAME_DATA_DIR:-data}
mkdir -p "$LOGS"
$PY manage.py migrate --noinput >/dev/null
$PY manage.py demo_user
$PY manage.py seed_demo

pids=()
stop() {
  trap - INT TERM EXIT
  echo; echo "stopping web server and worker..."
  for pid in "${pids[@]}"; do kill -TERM -- "-$pid" 2>/dev/null || kill -TERM "$pid" 2>/dev/null || true; done
  for pid in "${pids[@]}"; do
    for _ in $(seq 1 30); do kill -0 "$pid" 2>/dev/null || break; sleep 0.5; done
    kill -KILL -- "-$pid" 2>/dev/null || true
  done
  echo "stopped."
  exit 0
}
trap stop INT TERM EXIT

setsid $PY manage.py runserver --noreload "$HOST:$PORT" > "$LOGS/demo-web.log" 2>&1 &
pids+=($!)
setsid $PY manage.py render_worker --concurrency 1 > "$LOGS/demo-worker.log" 2>&1 &
pids+=($!)

if ! $PY manage.py healthcheck --wait 180 --url "http://$HOST:$PORT/login/"; then
  echo "the demo did not become healthy; see $LOGS/demo-web.log and $LOGS/demo-worker.log" >&2
  exit 1
fi
echo "Evenframe is up in $(( $(date +%s) - started )) s: http://$HOST:$PORT/  (Ctrl-C stops it)"
# Previews of the procedural assets for the asset library (rendered once; skipped when they exist).
setsid $PY manage.py asset_previews > "$LOGS/demo-previews.log" 2>&1 &
pids+=($!)
# Start (or resume) the demo campaign now that a worker is live, so dispatch is sized for it.
# seed_demo's last line names the demo campaign's id: "progress: manage.py campaign status <id>".
seeded=$($PY manage.py seed_demo --start)
echo "$seeded" | grep -v '^progress: ' | tail -1 || true
demo_id=$(echo "$seeded" | sed -n 's/^progress: manage.py campaign status \([0-9][0-9]*\)$/\1/p' | tail -1)
echo "progress: $PY manage.py campaign status ${demo_id}   (web: http://$HOST:$PORT/campaigns/${demo_id:+$demo_id/})"
wait "${pids[@]}"
