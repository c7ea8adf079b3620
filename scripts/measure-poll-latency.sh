#!/usr/bin/env bash
# Measures how fast GET /v1/searches/{id} answers while a search is running on the real service
# (Release build, real engine, one worker). Prints the number of polls made while the search was
# running, their median and 99th percentile in milliseconds. Not a test: numbers depend on the machine.
#
# Usage: scripts/measure-poll-latency.sh [POLLS]   (default 300)
# Needs: the OCR classifier (scripts/fetch-test-models.sh), /usr/bin/python3 with numpy, curl.
set -euo pipefail

polls="${1:-300}"
root="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
model="${BITBUDGET_MODEL_CACHE:-$HOME/.cache/bitbudget/ocr}/package/assets/ch_ppocr_mobile_v2.0_cls_infer.onnx"
if [ ! -f "$model" ]; then
  echo "error: $model is missing; run scripts/fetch-test-models.sh" >&2
  exit 1
fi

work="$(mktemp -d)"
data="$work/data"
mkdir -p "$data"
key="poll-latency-$RANDOM$RANDOM"
service_pid=""
cleanup() {
  if [ -n "$service_pid" ]; then
    # The service was started with setsid, so its process group holds dotnet run and the host it spawned.
    kill -- "-$service_pid" 2>/dev/null || true
    wait "$service_pid" 2>/dev/null || true
  fi
  rm -rf "$work"
}
trap cleanup EXIT

port="$(/usr/bin/python3 -c 'import socket; s = socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1]); s.close()')"
base="http://127.0.0.1:$port"
auth=(-H "Authorization: Bearer $key")

echo "building (Release)..."
dotnet build -c Release "$root/Service" -v q -nologo >"$work/build.log" 2>&1 || { cat "$work/build.log" >&2; exit 1; }

echo "starting the service on $base (data folder $data)..."
BITBUDGET_API_KEYS="$key" setsid dotnet run -c Release --no-build --project "$root/Service" -- serve \
  --urls "$base" --Bitbudget:DataFolder="$data" >"$work/service.log" 2>&1 &
service_pid=$!

for _ in $(seq 1 120); do
  if curl -fsS "$base/healthz" >/dev/null 2>&1; then break; fi
  if ! kill -0 "$service_pid" 2>/dev/null; then cat "$work/service.log" >&2; echo "error: the service exited" >&2; exit 1; fi
  sleep 0.5
done
curl -fsS "$base/healthz" >/dev/null || { tail -50 "$work/service.log" >&2; echo "error: /healthz never answered" >&2; exit 1; }

echo "generating the demo..."
dotnet run -c Release --no-build --project "$root/Service" -- demo --out "$work/demo" >"$work/demo.log" 2>&1 || { cat "$work/demo.log" >&2; exit 1; }
curl -fsS "${auth[@]}" -H 'Content-Type: application/octet-stream' --data-binary "@$work/demo/hive-monitor.onnx" "$base/v1/models?name=hive-monitor.onnx" >/dev/null

echo "uploading the OCR classifier and 16 calibration samples..."
curl -fsS "${auth[@]}" -H 'Content-Type: application/octet-stream' --data-binary "@$model" \
  "$base/v1/models?name=ch_ppocr_mobile_v2.0_cls_infer.onnx" >"$work/model.json"
read -r model_id input_name < <(/usr/bin/python3 -c 'import json, sys; m = json.load(open(sys.argv[1])); print(m["id"], m["inputs"][0]["name"])' "$work/model.json")
/usr/bin/python3 - "$work/calibration.npz" "$input_name" <<'PY'
import sys
import numpy as np
rng = np.random.default_rng(16)
np.savez(sys.argv[1], **{sys.argv[2]: rng.uniform(-1, 1, size=(16, 3, 48, 192)).astype(np.float32)})
PY
dataset_id="$(curl -fsS "${auth[@]}" -H 'Content-Type: application/octet-stream' --data-binary "@$work/calibration.npz" "$base/v1/datasets" \
  | /usr/bin/python3 -c 'import json, sys; print(json.load(sys.stdin)["id"])')"

# Starts a search with SQNR budget $1 dB and waits until a worker runs it; prints its id.
start_search() {
  local body id state=""
  body="{\"modelId\":\"$model_id\",\"datasetId\":\"$dataset_id\",\"budget\":{\"metric\":\"sqnr\",\"atLeast\":$1},\"bits\":[2,3,4,5,6,8]}"
  id="$(curl -fsS "${auth[@]}" -H 'Content-Type: application/json' -d "$body" "$base/v1/searches" \
    | /usr/bin/python3 -c 'import json, sys; print(json.load(sys.stdin)["id"])')"
  for _ in $(seq 1 600); do
    state="$(curl -fsS "${auth[@]}" "$base/v1/searches/$id" | grep -o '"state":"[a-z]*"' | cut -d'"' -f4)"
    [ "$state" != "queued" ] && break
    sleep 0.05
  done
  if [ "$state" != "running" ]; then
    echo "error: search $id is $state, not running; nothing to measure" >&2
    return 1
  fi
  echo "$id"
}

# When a search ends before all polls are made, the next one (budget one dB higher, so a distinct search) takes over.
budget=30
searches=1
search_id="$(start_search "$budget")"
echo "search $search_id running; polling $polls times while searches run..."
: >"$work/times"
made=0
while [ "$made" -lt "$polls" ]; do
  time_s="$(curl -sS -o "$work/poll.json" -w '%{time_total}' "${auth[@]}" "$base/v1/searches/$search_id")"
  state="$(grep -o '"state":"[a-z]*"' "$work/poll.json" | cut -d'"' -f4)"
  # Only polls answered while the search was running count: that is when the worker competes for the store.
  if [ "$state" = "running" ]; then
    echo "$time_s" >>"$work/times"
    made=$((made + 1))
  else
    grep -o '"startedAt":"[^"]*","finishedAt":"[^"]*"' "$work/poll.json" >>"$work/spans" || true
    [ "$state" = "succeeded" ] || { echo "error: search $search_id ended $state" >&2; cat "$work/poll.json" >&2; exit 1; }
    budget=$((budget + 1))
    searches=$((searches + 1))
    search_id="$(start_search "$budget")"
  fi
done

/usr/bin/python3 - "$work/times" "$searches" "$work/spans" <<'PY'
import datetime
import os
import sys
import numpy as np
times = np.loadtxt(sys.argv[1], ndmin=1) * 1000.0
spans = []
if os.path.exists(sys.argv[3]):
    for line in open(sys.argv[3]):
        started, finished = (part.split('":"')[1].rstrip('"') for part in line.strip().split('","'))
        spans.append((datetime.datetime.fromisoformat(finished) - datetime.datetime.fromisoformat(started)).total_seconds())
finished = ", ".join(f"{s:.1f} s" for s in spans) or "none finished during the polls"
print(f"polls counted while a search was running: {times.size} (over {sys.argv[2]} search(es); durations of those that finished: {finished})")
print(f"median {np.median(times):.2f} ms, p99 {np.percentile(times, 99):.2f} ms, max {times.max():.2f} ms")
PY
