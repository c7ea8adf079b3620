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

/usr/bin/python3 - "$out" <<'PY'
import sys, numpy as np
out = sys.argv[1]

def pages(count, height, width, seed, background, ink):
    """Rows of text-like glyphs (a few strokes each) in ink on a plain background, with mild noise."""
    rng = np.random.default_rng(seed)
    x = np.full((count, 3, height, width), background, dtype=np.float32)
    for n in range(count):
        for _ in range(rng.integers(1, 5) if height > 64 else 1):
            glyph = int(rng.integers(8, 14)) if height > 64 else int(rng.integers(height // 2, height - 8))
            top = int(rng.integers(2, height - glyph - 1))
            left = int(rng.integers(2, width // 3))
            while left < width - 10 and rng.random() > 0.05:
                span = int(rng.integers(3, 8)) if height > 64 else int(rng.integers(glyph // 3, glyph))
                for _ in range(rng.integers(1, 4)):
                    if rng.random() < 0.5:
                        at = left + int(rng.integers(0, span))
                        x[n, :, top:top + glyph, at:at + 2] = ink
                    else:
                        at = top + int(rng.integers(0, glyph))
                        x[n, :, at:at + 2, left:left + span] = ink
                left += span + int(rng.integers(1, 4))
        x[n] += rng.normal(0, 0.05, size=(3, height, width)).astype(np.float32)
    return x

# Pixel p in [0, 1] normalised as these models' exporters do (from memory): (p - 0.5) / 0.5 for the
# classifier and recogniser, ImageNet mean/std (about (p - 0.485) / 0.229) for the detector.
paper, ink = 0.9, 0.1
np.savez(f"{out}/classifier.npz", x=pages(8, 48, 192, 1, (paper - 0.5) / 0.5, (ink - 0.5) / 0.5))
np.savez(f"{out}/detector.npz", x=pages(2, 128, 128, 2, (paper - 0.485) / 0.229, (ink - 0.485) / 0.229))
np.savez(f"{out}/recogniser.npz", x=pages(4, 48, 320, 3, (paper - 0.5) / 0.5, (ink - 0.5) / 0.5))
PY

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
