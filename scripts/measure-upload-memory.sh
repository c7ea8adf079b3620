#!/usr/bin/env bash
# Measures the service's resident memory just started (VmRSS), its peak while it refuses or accepts a large
# upload (VmHWM), and its resident memory 5 s after, each case in a freshly started process:
#   1. a 1 GiB - 1 byte body of zeros sent as a dataset (under the 1 GiB limit, refused as not a dataset)
#   2. 500 MiB of random bytes sent as a model (under the 512 MiB limit, refused as not ONNX)
#   3. a 2 GiB chunked body (no Content-Length) sent as a dataset, refused with 413
#   4. a 14 MB .npz whose one float32 array [1835008, 1, 16, 16] inflates to 1.88 GB (compression ratio
#      about 130, under the 200 zip-bomb limit); the sample limit is raised so the upload itself is accepted
#   5. POST /v1/searches with the demo model on that dataset (API-only process: no worker runs the job)
# Not a test: numbers depend on the machine. Prints one line per case.
#
# Usage: scripts/measure-upload-memory.sh [SOURCE_ROOT]   (default: this checkout; give another checkout
#        to measure an older version the same way)
# Needs: /usr/bin/python3 with numpy, curl, about 4 GB of free disk in $TMPDIR.
set -euo pipefail

root="${1:-$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)}"
work="$(mktemp -d)"
data="$work/data"
mkdir -p "$data"
key="upload-memory-$RANDOM$RANDOM"
service_pid=""
cleanup() {
  if [ -n "$service_pid" ]; then
    kill "$service_pid" 2>/dev/null || true
    wait "$service_pid" 2>/dev/null || true
  fi
  rm -rf "$work"
}
trap cleanup EXIT

port="$(/usr/bin/python3 -c 'import socket; s = socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1]); s.close()')"
base="http://127.0.0.1:$port"
auth=(-H "Authorization: Bearer $key")

echo "building $root (Release)..."
dotnet build -c Release "$root/Service" -v q -nologo >"$work/build.log" 2>&1 || { cat "$work/build.log" >&2; exit 1; }
dll="$(find "$root/Service/bin/Release" -name Bitbudget.Service.dll | head -1)"

echo "generating the demo and the inputs..."
dotnet "$dll" demo --out "$work/demo" >"$work/demo.log" 2>&1 || { cat "$work/demo.log" >&2; exit 1; }
truncate -s $(((1 << 30) - 1)) "$work/zeros.bin"
truncate -s $((2 << 30)) "$work/two-gib.bin"
head -c $((500 << 20)) /dev/urandom >"$work/noise.onnx"
/usr/bin/python3 - "$work/inflating.npz" <<'PY'
import sys
import zipfile
import numpy as np
# One member written chunk by chunk so this script never holds the 1.88 GB array: each 1 MiB chunk is
# zeros with one random float32 in 260, which deflates about 130 to 1 (printed below, not assumed).
samples, chunk_samples = 1835008, 1024
rng = np.random.default_rng(9)
with zipfile.ZipFile(sys.argv[1], "w", compression=zipfile.ZIP_DEFLATED) as archive:
    with archive.open("spectrogram.npy", "w", force_zip64=True) as member:
        np.lib.format.write_array_header_1_0(member, {"descr": "<f4", "fortran_order": False, "shape": (samples, 1, 16, 16)})
        for _ in range(samples // chunk_samples):
            chunk = np.zeros(chunk_samples * 256, dtype=np.float32)
            chunk[rng.integers(0, chunk.size, chunk.size // 260)] = rng.uniform(-1, 1, chunk.size // 260)
            member.write(chunk.tobytes())
info = zipfile.ZipFile(sys.argv[1]).infolist()[0]
print(f"inflating.npz: {info.compress_size} bytes inflating to {info.file_size} (ratio {info.file_size / info.compress_size:.0f})")
PY

# Each case runs in a freshly started process (the data folder persists), so no case inherits another's memory.
start_service() {
  BITBUDGET_API_KEYS="$key" dotnet "$dll" serve --urls "$base" --Bitbudget:DataFolder="$data" --Bitbudget:Workers=0 \
    --Bitbudget:MaxDatasetSamples=10000000 >>"$work/service.log" 2>&1 &
  service_pid=$!
  for _ in $(seq 1 120); do
    if curl -fsS "$base/healthz" >/dev/null 2>&1; then return 0; fi
    kill -0 "$service_pid" 2>/dev/null || { cat "$work/service.log" >&2; echo "error: the service exited" >&2; exit 1; }
    sleep 0.5
  done
  echo "error: /healthz never answered" >&2
  exit 1
}
stop_service() {
  kill "$service_pid" 2>/dev/null || true
  wait "$service_pid" 2>/dev/null || true
  service_pid=""
}

echo "starting the service on $base (API only, data folder $data)..."
start_service
status_kib() { grep "^$1:" "/proc/$service_pid/status" | awk '{print $2}'; }
model_id="$(curl -fsS "${auth[@]}" -H 'Content-Type: application/octet-stream' --data-binary "@$work/demo/hive-monitor.onnx" \
  "$base/v1/models?name=hive-monitor.onnx" | /usr/bin/python3 -c 'import json, sys; print(json.load(sys.stdin)["id"])')"
sleep 2
printf '%-58s %7s %-26s %10s %10s %12s\n' "case" "status" "problem type / id" "start MiB" "peak MiB" "after 5s MiB"

# Runs curl with the given arguments as one case and prints its line.
measure() {
  local label="$1" code answer
  shift
  stop_service
  start_service
  sleep 1
  local idle; idle=$(($(status_kib VmRSS) / 1024))
  code="$(curl -sS -o "$work/answer.json" -w '%{http_code}' "${auth[@]}" "$@" || true)"
  answer="$(/usr/bin/python3 -c 'import json, sys
try:
    a = json.load(open(sys.argv[1])); print((a.get("type") or a.get("id") or "").rsplit("/", 1)[-1])
except Exception:
    print("-")' "$work/answer.json")"
  local peak; peak=$(($(status_kib VmHWM) / 1024))
  sleep 5
  printf '%-58s %7s %-26s %10s %10s %12s\n' "$label" "$code" "$answer" "$idle" "$peak" "$(($(status_kib VmRSS) / 1024))"
  cp "$work/answer.json" "$work/last.json"
}

octet=(-H 'Content-Type: application/octet-stream')
# -T streams the file (--data-binary @file would load it into curl's memory first).
measure "1 GiB - 1 byte of zeros as a dataset (Content-Length)" "${octet[@]}" -X POST -T "$work/zeros.bin" "$base/v1/datasets"
measure "500 MiB of random bytes as a model (limit 512 MiB)" "${octet[@]}" -X POST -T "$work/noise.onnx" "$base/v1/models?name=noise.onnx"
measure "2 GiB chunked body as a dataset" "${octet[@]}" -H 'Transfer-Encoding: chunked' -X POST -T "$work/two-gib.bin" "$base/v1/datasets"
measure "12 MB .npz inflating to 1.88 GB as a dataset" "${octet[@]}" -X POST -T "$work/inflating.npz" "$base/v1/datasets"
dataset_id="$(/usr/bin/python3 -c 'import json, sys; print(json.load(open(sys.argv[1])).get("id", ""))' "$work/last.json")"
if [ -n "$dataset_id" ]; then
  measure "search on the demo model with that dataset" -H 'Content-Type: application/json' \
    -d "{\"modelId\":\"$model_id\",\"datasetId\":\"$dataset_id\",\"budget\":{\"metric\":\"sqnr\",\"atLeast\":30}}" "$base/v1/searches"
  detail="$(/usr/bin/python3 -c 'import json, sys; print(json.load(open(sys.argv[1])).get("detail", ""))' "$work/last.json")"
  echo "  detail: $detail"
fi
