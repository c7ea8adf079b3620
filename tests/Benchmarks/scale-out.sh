#!/usr/bin/env bash
# Scale-out benchmark: the OCR classifier's search on one PostgreSQL database with 1 and then 2 worker
# processes of the Release binary, each pinned to one core (taskset) with one ONNX Runtime thread, the sweep
# split into parts (Bitbudget:SweepParts). Prints the sweep's wall time for each and their ratio, and the
# status-poll latency (median, p99) of the API process while the two workers sweep. Not a test: the numbers
# depend on the machine (2 cores here, shared with whatever else runs).
#
# Usage: tests/Benchmarks/scale-out.sh [SAMPLES] [PARTS]   (defaults 16 and 8)
# Needs: the OCR classifier (scripts/fetch-test-models.sh), /usr/bin/python3 with numpy, curl, taskset, and
# PostgreSQL (scripts/start-test-postgres.sh starts one on 127.0.0.1; BITBUDGET_TEST_POSTGRES names it).
set -euo pipefail

samples="${1:-16}"
parts="${2:-8}"
root="$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)"
model="${BITBUDGET_MODEL_CACHE:-$HOME/.cache/bitbudget/ocr}/package/assets/ch_ppocr_mobile_v2.0_cls_infer.onnx"
[ -f "$model" ] || { echo "error: $model is missing; run scripts/fetch-test-models.sh" >&2; exit 1; }
if [ -z "${BITBUDGET_TEST_POSTGRES:-}" ]; then eval "$("$root/scripts/start-test-postgres.sh")"; fi
cores="$(nproc)"

work="$(mktemp -d)"
key="scale-$RANDOM$RANDOM"
pids=()
cleanup() {
  for pid in "${pids[@]}"; do kill "$pid" 2>/dev/null || true; wait "$pid" 2>/dev/null || true; done
  rm -rf "$work"
}
trap cleanup EXIT

# The test server's connection string as a libpq URI for psql, on database $1.
conn() { /usr/bin/python3 -c 'import sys; d = dict(p.split("=", 1) for p in sys.argv[1].split(";") if p); print("postgresql://%s@%s:%s/%s" % (d["Username"], d["Host"], d["Port"], sys.argv[2]))' "$BITBUDGET_TEST_POSTGRES" "$1"; }
free_port() { /usr/bin/python3 -c 'import socket; s = socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1]); s.close()'; }
json() { /usr/bin/python3 -c "import json, sys; print(json.load(sys.stdin)$1)"; }

echo "building (Release)..."
dotnet build -c Release "$root/Service" -v q -nologo >"$work/build.log" 2>&1 || { cat "$work/build.log" >&2; exit 1; }
binary="$root/Service/bin/Release/net10.0/Bitbudget.Service.dll"

/usr/bin/python3 - "$work/calibration.npz" "$samples" <<'PY'
import sys
import numpy as np
rng = np.random.default_rng(16)
np.savez(sys.argv[1], x=rng.uniform(-1, 1, size=(int(sys.argv[2]), 3, 48, 192)).astype(np.float32))
PY

# start NAME CPU SETTINGS...: starts the binary (pinned to CPU unless it is "-"), waits for /healthz, sets $started to its base URL.
start() {
  local name="$1" cpu="$2" port pin=()
  shift 2
  port="$(free_port)"
  mkdir -p "$work/$name"
  [ "$cpu" != "-" ] && pin=(taskset -c "$cpu")
  BITBUDGET_API_KEYS="$key" "${pin[@]}" dotnet "$binary" serve --urls "http://127.0.0.1:$port" \
    --Bitbudget:DataFolder="$work/$name" "$@" >"$work/$name.log" 2>&1 &
  pids+=($!)
  for _ in $(seq 1 120); do
    curl -fsS "http://127.0.0.1:$port/healthz" >/dev/null 2>&1 && { started="http://127.0.0.1:$port"; return; }
    sleep 0.5
  done
  tail -30 "$work/$name.log" >&2
  return 1
}

# run WORKERS: one search with WORKERS workers on a database of its own (dropped after); prints "sweep_seconds
# search_seconds sweep_trials measuring_workers" and leaves poll times in $work/polls-WORKERS.
run() {
  local workers="$1" db="bitbudget_scale_${1}_$RANDOM" api base auth model_id dataset_id id state
  # run is its own subshell (process substitution): stop what it started however it ends.
  trap 'for pid in "${pids[@]}"; do kill "$pid" 2>/dev/null || true; done' EXIT
  psql "$(conn postgres)" -qc "CREATE DATABASE $db;" >/dev/null
  local connection="${BITBUDGET_TEST_POSTGRES%%Database=*}Database=$db"
  local shared=(--Bitbudget:Store=postgres "--Bitbudget:ConnectionString=$connection" "--Bitbudget:BlobFolder=$work/blobs-$workers" --Bitbudget:QueuePollIntervalMs=100)
  start "api-$workers" - "${shared[@]}" --Bitbudget:Role=api
  base="$started"
  for i in $(seq 0 $((workers - 1))); do
    start "worker-$workers-$i" $((i % cores)) "${shared[@]}" --Bitbudget:Role=worker --Bitbudget:Workers=1 \
      --Bitbudget:OnnxThreads=1 "--Bitbudget:SweepParts=$parts"
  done
  auth=(-H "Authorization: Bearer $key")
  model_id="$(curl -fsS "${auth[@]}" -H 'Content-Type: application/octet-stream' --data-binary "@$model" "$base/v1/models?name=ocr-classifier.onnx" | json '["id"]')"
  dataset_id="$(curl -fsS "${auth[@]}" -H 'Content-Type: application/octet-stream' --data-binary "@$work/calibration.npz" "$base/v1/datasets" | json '["id"]')"
  id="$(curl -fsS "${auth[@]}" -H 'Content-Type: application/json' \
    -d "{\"modelId\":\"$model_id\",\"datasetId\":\"$dataset_id\",\"budget\":{\"metric\":\"sqnr\",\"atLeast\":30},\"bits\":[2,3,4,5,6,8]}" \
    "$base/v1/searches" | json '["id"]')"
  : >"$work/polls-$workers"
  for _ in $(seq 1 20000); do
    time_s="$(curl -sS -o "$work/poll.json" -w '%{time_total}' "${auth[@]}" "$base/v1/searches/$id")"
    state="$(json '["state"]' <"$work/poll.json")"
    stage="$(json '.get("stage") or ""' <"$work/poll.json")"
    # Polls answered while the workers sweep: that is when they compete with the API for the database.
    [ "$state" = "running" ] && [ "$stage" = "sweep" ] && echo "$time_s" >>"$work/polls-$workers"
    case "$state" in succeeded) break ;; failed | canceled) cat "$work/poll.json" >&2; return 1 ;; esac
    sleep 0.02
  done
  psql "$(conn "$db")" -tAc "
    SELECT round(extract(epoch FROM (SELECT max(finished_at)::timestamptz FROM sweep_parts WHERE search_id = '$id') - started_at::timestamptz)::numeric, 2),
           round(extract(epoch FROM finished_at::timestamptz - started_at::timestamptz)::numeric, 2),
           (SELECT count(*) FROM trials WHERE search_id = '$id' AND kind = 'sensitivity'),
           (SELECT count(DISTINCT measured_by) FROM trials WHERE search_id = '$id' AND kind = 'sensitivity')
    FROM searches WHERE id = '$id';" | tr '|' ' '
  for pid in "${pids[@]}"; do kill "$pid" 2>/dev/null || true; wait "$pid" 2>/dev/null || true; done
  pids=()
  psql "$(conn postgres)" -qc "DROP DATABASE IF EXISTS $db WITH (FORCE);" >/dev/null
}

echo "OCR classifier, $samples samples, bits 2,3,4,5,6,8, sweep in $parts parts, $cores cores"
read -r sweep1 total1 trials1 measuring1 < <(run 1)
echo "1 worker : sweep $sweep1 s (search $total1 s), $trials1 sweep trials by $measuring1 worker(s)"
read -r sweep2 total2 trials2 measuring2 < <(run 2)
echo "2 workers: sweep $sweep2 s (search $total2 s), $trials2 sweep trials by $measuring2 worker(s)"
/usr/bin/python3 - "$sweep1" "$sweep2" "$work/polls-2" <<'PY'
import sys
import numpy as np
one, two = float(sys.argv[1]), float(sys.argv[2])
print(f"sweep wall time 1 worker / 2 workers: {one / two:.2f}x")
times = np.loadtxt(sys.argv[3], ndmin=1) * 1000.0
print(f"status polls on the API while 2 workers swept: {times.size}, median {np.median(times):.2f} ms, p99 {np.percentile(times, 99):.2f} ms, max {times.max():.2f} ms")
PY
