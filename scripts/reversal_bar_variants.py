"""The reversal cell (cell 1) on variants of the reversing-bar protocol's bar (docs/performance.md,
session 14): for each bar width, contrast and speed, the mean rate in the 200 ms after the reversal, in
the smooth-motion window (400 to 200 ms before it) and their ratio, for each model given. The
movie is the protocol's geometry (`reversing-bar reversal_um=1550`: a vertical bar at 1 mm/s,
0.2 px per frame, reversing 6 px right of the centre after 80 frames), drawn here with the same
column coverage, so the 2 px, contrast 1, 0.2 px per frame row repeats the protocol's value. It shows how steeply
a model's reversal response depends on the bar near the protocol's.

    python3 scripts/reversal_bar_variants.py MODEL [MODEL ...]    # numpy, onnxruntime
"""

import sys

import numpy as np
import onnxruntime as ort
from planted_response_statistics import rates

LAGS, SIZE = 40, 50
TURN, APPROACH, AFTER = 6.0, 80, 80
# (width px, contrast, speed px per frame); the protocol's bar is (2, 1.0, 0.2).
VARIANTS = [(1.5, 1.0, 0.2), (2, 0.6, 0.2), (2, 0.8, 0.2), (2, 1.0, 0.2), (2.5, 0.8, 0.2), (2.5, 1.0, 0.2)]
VARIANTS += [(3, 0.8, 0.2), (3, 1.0, 0.2), (4, 1.0, 0.2), (2, 1.0, 0.15), (2, 1.0, 0.25), (2, 1.0, 0.3)]


def movie(width, contrast, speed):
    """A vertical bar at `speed` px per frame reversing TURN px right of the centre, after LAGS - 1 blank frames."""
    frames = np.zeros((LAGS - 1 + APPROACH + AFTER, SIZE, SIZE), np.float32)
    x = np.arange(SIZE) + 0.5 - SIZE / 2
    for k in range(APPROACH + AFTER):
        at = TURN - speed * abs(k - APPROACH)
        cover = np.clip(np.minimum(x + 0.5, at + width / 2) - np.maximum(x - 0.5, at - width / 2), 0, 1)
        frames[LAGS - 1 + k] = contrast * cover[None, :]
    return frames


def cell1(session, frames):
    return rates(session, frames.astype(np.float32))[:, 1]


def main():
    sessions = [ort.InferenceSession(path) for path in sys.argv[1:]]
    print("width_px contrast speed  " + "  ".join(f"reversal/smooth=ratio [{p}]" for p in sys.argv[1:]))
    for width, contrast, speed in VARIANTS:
        cells = []
        for session in sessions:
            rate = cell1(session, movie(width, contrast, speed))  # row k = movie frame k of the bar
            reversal, smooth = rate[APPROACH : APPROACH + 20].mean(), rate[APPROACH - 40 : APPROACH - 20].mean()
            cells.append(f"{reversal:.2f}/{smooth:.2f}={reversal / smooth:.1f}")
        print(f"{width} {contrast} {speed}  " + "  ".join(cells))
    print(f"onnxruntime {ort.__version__}, numpy {np.__version__}")


if __name__ == "__main__":
    main()
