#!/usr/bin/env bash
# Reproduces README's "Written file sizes" table: plans the demo model and the three OCR models with the CLI
# (default candidates, container storage) and prints, per model, the uploaded, FP32 and written file sizes from
# each manifest. The OCR calibration sets are synthetic "pages" written by NumPy with a fixed seed (rows of
# stroke glyphs in dark ink on light paper), so the SQNR figures say little about real text.
# Usage: scripts/measure-file-sizes.sh [OUT_DIR]   (needs scripts/fetch-test-models.sh to have run, and NumPy)
set -euo pipefail
cd "$(dirname "$0")/.."
out="${1:-${TMPDIR:-/tmp}/bitbudget-file-sizes}"
models="${BITBUDGET_MODEL_CACHE:-$HOME/.cache/bitbudget/ocr}/package/assets"
mkdir -p "$out"

dotnet build Service -c Release -v quiet -nologo >/dev/null
cli=(dotnet Service/bin/Release/net10.0/Bitbudget.Service.dll)

/usr/bin/python3 scripts/make-ocr-pages.py "$out"

"${cli[@]}" demo --out "$out/demo" >/dev/null
plan() { # name model data budget [extra options]
  local name=$1 model=$2 data=$3 budget=$4; shift 4
  "${cli[@]}" plan --model "$model" --data "$data" --budget "$budget" --out "$out/$name" "$@" >/dev/null 2>"$out/$name.log" || true
}
plan demo "$out/demo/hive-monitor.onnx" "$out/demo/calibration.npz" "sqnr>=30"
plan demo-bits "$out/demo/hive-monitor.onnx" "$out/demo/calibration.npz" "sqnr>=30" --bits 2,3,4,6,8
plan classifier "$models/ch_ppocr_mobile_v2.0_cls_infer.onnx" "$out/classifier.npz" "sqnr>=30"
plan classifier-21 "$models/ch_ppocr_mobile_v2.0_cls_infer.onnx" "$out/classifier.npz" "sqnr>=30" --target-opset 21
plan detector "$models/ch_PP-OCRv4_det_infer.onnx" "$out/detector.npz" "sqnr>=15"
plan recogniser "$models/ch_PP-OCRv4_rec_infer.onnx" "$out/recogniser.npz" "sqnr>=30"

/usr/bin/python3 - "$out" "$models" "$out/demo/hive-monitor.onnx" <<'PY'
import json, os, sys, collections
out, models, demo = sys.argv[1:]
rows = [("demo", demo, "sqnr>=30"), ("demo-bits", demo, "sqnr>=30"),
        ("classifier", f"{models}/ch_ppocr_mobile_v2.0_cls_infer.onnx", "sqnr>=30"),
        ("classifier-21", f"{models}/ch_ppocr_mobile_v2.0_cls_infer.onnx", "sqnr>=30"),
        ("detector", f"{models}/ch_PP-OCRv4_det_infer.onnx", "sqnr>=15"),
        ("recogniser", f"{models}/ch_PP-OCRv4_rec_infer.onnx", "sqnr>=30")]
print("| Model (opset) | Budget | Uploaded file | FP32 file | Quantized file | Ratio | Layers |")
print("|---|---|---|---|---|---|---|")
for name, model, budget in rows:
    path = f"{out}/{name}/manifest.json"
    if not os.path.exists(path):
        print(f"| {name} | {budget} | plan failed, see {out}/{name}.log | | | | |"); continue
    m = json.load(open(path))
    t = m["totals"]
    if t is None:
        print(f"| {name} | {budget} | infeasible: {m['outcome']['message']} | | | | |"); continue
    written = os.path.getsize(f"{out}/{name}/model.quantized.onnx") if os.path.exists(f"{out}/{name}/model.quantized.onnx") else t["modelFileBytes"]
    kinds = collections.Counter("FP32" if l["bits"] == 32 else "FP16" if l["bits"] == 16 else f"{l['bits']}-bit" for l in m["layers"])
    layers = ", ".join(f"{k} {v}" for k, v in sorted(kinds.items()))
    opset = m['model']['opset'] if m['model']['originalOpset'] == m['model']['opset'] else f"{m['model']['originalOpset']} raised to {m['model']['opset']}"
    print(f"| {name} ({opset}) | `{budget}` | {os.path.getsize(model):,} B | {t['float32Bytes']:,} B | {written:,} B "
          f"| {t['float32Bytes'] / written:.2f}x | {layers} |  counted {t['bytes']:,} B")
PY
