"""Why the planted reversal cell (cell 1) is hard to fit, and what a fitted model's cell 1 does
with the moving bars (docs/performance.md, session 11).

For the planted model: cell 1's rate on the fresh naturalistic movie and reversing bars of
`tests/demo_fitted.rs` (maximum, mean, fraction of frames above 1, share of the variance held by
the top 2 % of frames: a heavy tail means a rate loss and a correlation are decided by a few
bursts). For each fitted model given: its correlation with the planted cell 1 on each movie,
its peak around each planted bar event (runs of frames with the planted rate above 1), and its
false alarms (frames above 1 where the planted rate is below 0.5).

    cargo run --release --example fresh_movies -- /tmp/fresh
    python3 scripts/reversal_cell_statistics.py /tmp/fresh [FITTED.onnx ...]   # numpy, onnxruntime
"""

import sys

import numpy as np
import onnxruntime as ort

from planted_response_statistics import rates

PLANTED = "models/synthetic-sensor-planted.onnx"


def cell1(path, movie):
    return rates(ort.InferenceSession(path), movie.astype(np.float32))[:, 1]


def heavy_tail(x):
    v = (x - x.mean()) ** 2
    top = np.sort(v)[::-1][: len(v) // 50].sum() / v.sum()
    return f"max {x.max():.1f}, mean {x.mean():.2f}, frames above 1 {100 * (x > 1).mean():.1f} %, top 2 % of frames hold {100 * top:.0f} % of the variance"


def runs(mask):
    idx = np.where(mask)[0]
    return np.split(idx, np.where(np.diff(idx) > 5)[0] + 1) if len(idx) else []


def main():
    folder, fitted = sys.argv[1], sys.argv[2:]
    for name in ["naturalistic", "reversing-bars"]:
        movie = np.load(f"{folder}/{name}.npy")
        planted = cell1(PLANTED, movie)
        print(f"{name}, planted cell 1: {heavy_tail(planted)}")
        events = runs(planted > 1)
        for path in fitted:
            f = cell1(path, movie)
            line = f"  {path}: r {np.corrcoef(planted, f)[0, 1]:.2f}"
            if name == "reversing-bars":
                peaks = [f[max(e[0] - 3, 0) : e[-1] + 4].max() for e in events]
                alarms = runs((f > 1) & (planted < 0.5))
                line += (
                    f"; {len(events)} planted events (peaks {' '.join(f'{planted[e].max():.1f}' for e in events)}),"
                    f" fitted peaks there {' '.join(f'{p:.1f}' for p in peaks)};"
                    f" false alarms: {sum(len(a) for a in alarms)} frames in {len(alarms)} bouts"
                )
            print(line)
    print(f"onnxruntime {ort.__version__}, numpy {np.__version__}")


if __name__ == "__main__":
    main()
