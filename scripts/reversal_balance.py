"""Why the planted reversal cell has a threshold: how its reversal response depends on the
balance between each direction-selective pathway and its delayed copy.

A numpy replica of the planted cell 1 (pathways 4-7, their pools, the reversal units, the
readout; src/demo/planted.rs) is first checked against the shipped planted model
(onnxruntime) on the reversing bar of the `demo` run (2 px bar, 1 mm/s, reversal 31 px from the
left edge, 800 ms approach). It then scales the delayed copies' weight by gamma (a fitted model
never matches it exactly) and prints the reversal / smooth ratio of the `reversing-bar` metric
(mean rate in the 200 ms after the reversal over the mean rate 400-200 ms before it) for unit
thresholds theta (the units keep their ceiling of 1), and the correlation of the imbalanced cell with the balanced one on a
naturalistic movie (what a fit's loss sees). Last, how much of the cell's response to drifting
scenes (smooth and sharp-edged) survives blurring the movie: if nearly all of it, scenes cannot
teach a fit how the cell answers a thin bar.

    python3 scripts/reversal_balance.py    # needs numpy and onnxruntime
"""

import numpy as np
import onnxruntime as ort

from planted_response_statistics import pink_image, rates, view

LAGS, SIZE, K1, FRAME_MS = 40, 50, 15, 10.0
DS_SPEED, DS_PEAK_MS, DS_WIDTH_MS, DS_DELAY_MS, DS_THRESHOLD = 0.2, 100.0, 40.0, 80.0, 4.0
PLANTED_THETA, PLANTED_CEILING = 0.5, 1.0


def kernel(sign, peak):
    """A direction-selective kernel [lags, 15, 15]: a Gaussian spot (s.d. 1 px) moving at
    DS_SPEED under a Gaussian envelope peaking `peak` ms before the response."""
    c = (K1 - 1) / 2
    y, x = np.mgrid[0:K1, 0:K1]
    k = np.zeros((LAGS, K1, K1))
    for l in range(LAGS):
        t = (LAGS - 1 - l) * FRAME_MS
        dx = sign * DS_SPEED * (t - peak) / FRAME_MS
        spot = np.exp(-((y - c) ** 2 + (x - c - dx) ** 2) / 2) / (2 * np.pi)
        k[l] = spot * np.exp(-((t - peak) ** 2) / (2 * DS_WIDTH_MS**2))
    return k


KERNELS = np.stack([kernel(s, p) for s, p in [(-1, DS_PEAK_MS), (-1, DS_PEAK_MS + DS_DELAY_MS), (1, DS_PEAK_MS), (1, DS_PEAK_MS + DS_DELAY_MS)]])


def pathways(movie):
    """Thresholded drive of pathways 4-7 at the 16 x 16 first-layer positions the readout sees."""
    frames = len(movie)
    padded = np.concatenate([np.zeros((LAGS - 1, SIZE, SIZE)), movie])[:, 10:40, 10:40]
    windows = np.lib.stride_tricks.sliding_window_view(padded, (K1, K1), axis=(1, 2))
    per_lag = np.tensordot(windows, KERNELS, axes=([3, 4], [2, 3]))
    drive = sum(per_lag[l : l + frames, :, :, :, l] for l in range(LAGS))
    return np.maximum(drive.transpose(0, 3, 1, 2) - DS_THRESHOLD, 0)


def cell(active, theta, gamma, ceiling=PLANTED_CEILING):
    """Cell 1's rate: at each of the 4 readout positions, each direction's 13 x 13 pool (weight
    8) minus gamma times its delayed copy's, less theta, rectified and capped at `ceiling`;
    summed with weight 2, bias -1, softplus."""
    total = 0
    for qy in (0, 1):
        for qx in (0, 1):
            pool = active[:, :, qy + 1 : qy + 14, qx + 1 : qx + 14].sum(axis=(2, 3)) / 169
            for direct, delayed in [(0, 1), (2, 3)]:
                total = total + np.clip(8 * (pool[:, direct] - gamma * pool[:, delayed]) - theta, 0, ceiling)
    return np.log1p(np.exp(2 * total - 1))


def reversing_bar():
    """The `demo` run's reversing bar: 2 px wide, full contrast, 0.2 px per frame, reversing at
    31 px after 80 frames, 80 frames after; returns the movie and the reversal frame."""
    frames, reversal, x_rev, v = 160, 80, 31.0, 0.2
    movie = np.zeros((frames, SIZE, SIZE))
    columns = np.arange(SIZE)
    for t in range(frames):
        centre = x_rev - v * reversal + v * (t if t <= reversal else 2 * reversal - t)
        cover = np.clip(np.minimum(columns + 1, centre + 1) - np.maximum(columns, centre - 1), 0, 1)
        movie[t] = cover[None, :]
    return movie, reversal


def drifting_scene(frames, rng, size=256):
    """A view on a pink image drifting with an Ornstein-Uhlenbeck velocity (s.d. 0.3 px per
    frame, 200 ms correlation), as the fit's naturalistic movies."""
    image = pink_image(size, 0.35, rng)
    pos, v = rng.uniform(0, size, 2), np.zeros(2)
    decay = np.exp(-1 / 20)
    movie = np.zeros((frames, SIZE, SIZE))
    for t in range(frames):
        v = decay * v + 0.3 * np.sqrt(1 - decay**2) * rng.normal(size=2)
        pos = (pos + v) % size
        movie[t] = view(image, pos)
    return movie


def main():
    movie, reversal = reversing_bar()
    bar = pathways(movie)
    session = ort.InferenceSession("models/synthetic-sensor-planted.onnx")
    # Gray before the movie, as `sufficit respond` pads it.
    padded = np.concatenate([np.zeros((LAGS - 1, SIZE, SIZE)), movie]).astype(np.float32)
    shipped = rates(session, padded)[:, 1]
    print(f"replica vs shipped planted model: max |difference| {np.abs(shipped - cell(bar, PLANTED_THETA, 1.0)).max():.1e}")
    scene = pathways(drifting_scene(2000, np.random.default_rng(5)))
    gammas = [0.7, 0.75, 0.8, 0.9, 1.0, 1.1, 1.25]
    print("theta | reversal / smooth for gamma " + " ".join(f"{g:5}" for g in gammas) + " | r on a drifting scene, gamma 0.8")
    for theta in [0.0, 0.5, 0.75, 1.0]:
        ratios = []
        for g in gammas:
            rate = cell(bar, theta, g)
            ratios.append(rate[reversal : reversal + 20].mean() / rate[reversal - 40 : reversal - 20].mean())
        r = np.corrcoef(cell(scene, theta, 0.8), cell(scene, theta, 1.0))[0, 1]
        print(f"{theta:5} | {' '.join(f'{x:5.1f}' for x in ratios)} | {r:.3f}")
    f = np.fft.fftfreq(SIZE)
    fy, fx = np.meshgrid(f, f, indexing="ij")
    smooth = drifting_scene(2000, np.random.default_rng(7))
    for name, movie in [("drifting pink scene", smooth), ("the same, sharp-edged (sign x 0.5)", np.sign(smooth) * 0.5)]:
        full = cell(pathways(movie), PLANTED_THETA, 1.0)
        for sigma in [1.0, 2.0]:
            gain = np.exp(-2 * (np.pi * sigma) ** 2 * (fy**2 + fx**2))
            blurred = cell(pathways(np.real(np.fft.ifft2(np.fft.fft2(movie) * gain))), PLANTED_THETA, 1.0)
            print(f"{name}, blurred (Gaussian s.d. {sigma} px): r with unblurred {np.corrcoef(full, blurred)[0, 1]:.2f}")
    print(f"onnxruntime {ort.__version__}, numpy {np.__version__}")


if __name__ == "__main__":
    main()
