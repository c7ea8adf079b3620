"""Writes synthetic calibration "pages" for the three OCR models: classifier.npz, detector.npz, recogniser.npz in OUT_DIR.

Rows of stroke glyphs in dark ink on light paper, with a fixed seed per model, so every script that plans the OCR
models plans them on the same data. Usage: make-ocr-pages.py OUT_DIR [CLASSIFIER DETECTOR RECOGNISER] (sample counts,
8 2 4 by default, the counts README's size table uses).
"""
import os
import sys

import numpy as np

out = sys.argv[1]
counts = [int(c) for c in sys.argv[2:5]] if len(sys.argv) >= 5 else [8, 2, 4]
os.makedirs(out, exist_ok=True)


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
np.savez(f"{out}/classifier.npz", x=pages(counts[0], 48, 192, 1, (paper - 0.5) / 0.5, (ink - 0.5) / 0.5))
np.savez(f"{out}/detector.npz", x=pages(counts[1], 128, 128, 2, (paper - 0.485) / 0.229, (ink - 0.485) / 0.229))
np.savez(f"{out}/recogniser.npz", x=pages(counts[2], 48, 320, 3, (paper - 0.5) / 0.5, (ink - 0.5) / 0.5))
