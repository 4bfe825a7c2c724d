"""How many of the planted reversal cell's bursts in moving-bar movies follow a reversal
(docs/performance.md, session 13): for each movie kind written by `examples/bar_movies.rs`, the
reversals (frames t where the view runs back over its path: frame t + k equals frame t - k for
k up to 10), the bursts of cell 1 (runs of frames with rate above 1) and which of them start
within 25 frames after a reversal, with each burst's peak.

    cargo run --release --example bar_movies -- /tmp/bars
    python3 scripts/reversal_events.py /tmp/bars    # numpy, onnxruntime
"""

import glob
import sys

import numpy as np
import onnxruntime as ort
from planted_response_statistics import rates

PLANTED = "models/synthetic-sensor-planted.onnx"
LAGS = 40


def cell1(session, movie):
    return rates(session, movie.astype(np.float32))[:, 1]


def reversals(movie):
    diff = lambda a, b: np.abs(movie[a] - movie[b]).max()
    return [
        t
        for t in range(12, movie.shape[0] - 12)
        if diff(t - 10, t) > 0.1 and all(diff(t + k, t - k) < 1e-3 for k in range(1, 11))
    ]


def bursts(rate):
    """(first row, peak) of each run of rates above 1."""
    out, t = [], 0
    while t < len(rate):
        if rate[t] > 1:
            u = t
            while u < len(rate) and rate[u] > 1:
                u += 1
            out.append((t, rate[t:u].max()))
            t = u
        else:
            t += 1
    return out


def main():
    session = ort.InferenceSession(PLANTED)
    for kind in ["steady", "steady-lone", "short", "sweeps"]:
        frames, count, after, other = 0, 0, [], []
        for path in sorted(glob.glob(f"{sys.argv[1]}/{kind}-[0-9]*.npy")):
            movie = np.load(path)
            rate = cell1(session, movie)
            events = reversals(movie)
            frames, count = frames + len(rate), count + len(events)
            for row, peak in bursts(rate):
                frame = row + LAGS - 1
                (after if any(0 <= frame - e <= 25 for e in events) else other).append(peak)
        peaks = lambda v: " ".join(f"{p:.1f}" for p in v)
        print(f"{kind}: {frames} frames, {count} reversals, {len(after) + len(other)} bursts, {len(after)} after a reversal")
        print(f"  peaks after a reversal: {peaks(after)}")
        print(f"  other peaks: {peaks(other)}")
    print(f"onnxruntime {ort.__version__}, numpy {np.__version__}")


if __name__ == "__main__":
    main()
