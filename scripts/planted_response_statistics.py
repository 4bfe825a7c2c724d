"""How the planted demo model's cells respond to training-like stimuli (onnxruntime forward).

Diagnoses why fitting the demo CNN is hard: prints each cell's mean, standard deviation and
kurtosis of the rate under 2-pixel binary noise (new pattern every frame, full contrast) and the
mean, standard deviation and maximum under full-field flicker: slow (100 ms holds) and, like the
fit's training flicker, Gaussian values held 1 to 5 frames at s.d. 0.35 and 0.12; and how often
the reversal cell fires under a pink (1/f) texture that moves steadily and reverses now and then
(a replica of `movies::reversing_texture`) at three contrasts. Heavy tails
(kurtosis >> 3, maxima far above the s.d.) mean a rate loss is dominated by rare bursts.

    python3 scripts/planted_response_statistics.py    # needs numpy and onnxruntime
"""

import numpy as np
import onnxruntime as ort

LAGS = 40
FRAMES = 1200


def rates(session, movie):
    windows = np.stack([movie[t - LAGS + 1 : t + 1] for t in range(LAGS - 1, len(movie))])
    name = session.get_inputs()[0].name
    parts = [session.run(None, {name: windows[i : i + 64]})[0] for i in range(0, len(windows), 64)]
    return np.concatenate(parts).reshape(len(windows), -1)


def pink_image(size, rms, rng):
    """1/f amplitude spectrum, random phases, scaled to RMS contrast `rms`, clipped to -1..1."""
    f = np.fft.fftfreq(size) * size
    fy, fx = np.meshgrid(f, f, indexing="ij")
    radius = np.hypot(fy, fx)
    radius[0, 0] = np.inf
    image = np.real(np.fft.ifft2(np.exp(1j * rng.uniform(0, 2 * np.pi, (size, size))) / radius))
    return np.clip((image - image.mean()) / image.std() * rms, -1, 1)


def reversing_texture(frames, rms, rng, size=256):
    """A 50 x 50 view of a periodic pink image moving at 0.1-0.4 pixels per frame in any
    direction; every 15-60 frames the motion reverses (probability 0.7) or takes a new velocity."""
    image = pink_image(size, rms, rng)

    def velocity():
        speed, angle = rng.uniform(0.1, 0.4), rng.uniform(0, 2 * np.pi)
        return np.array([speed * np.sin(angle), speed * np.cos(angle)])

    pos, v, left = rng.uniform(0, size, 2), velocity(), rng.integers(15, 61)
    movie = np.zeros((frames, 50, 50), np.float32)
    for t in range(frames):
        if left == 0:
            v = -v if rng.uniform() < 0.7 else velocity()
            left = rng.integers(15, 61)
        left -= 1
        pos = (pos + v) % size
        movie[t] = view(image, pos)
    return movie


def view(image, pos):
    """The 50 x 50 view of the periodic `image` whose top-left corner is at the sub-pixel
    position `pos` (bilinear interpolation, as `movies::render`)."""
    size, rows = len(image), np.arange(50)
    (y0, x0), (fy, fx) = np.floor(pos).astype(int), pos - np.floor(pos)
    at = lambda dy, dx: image[np.ix_((rows + y0 + dy) % size, (rows + x0 + dx) % size)]
    return (1 - fy) * ((1 - fx) * at(0, 0) + fx * at(0, 1)) + fy * ((1 - fx) * at(1, 0) + fx * at(1, 1))


def main():
    session = ort.InferenceSession("models/synthetic-sensor-planted.onnx")
    rng = np.random.default_rng(1)
    small = rng.choice([-1.0, 1.0], size=(FRAMES, 25, 25)).astype(np.float32)
    noise = np.repeat(np.repeat(small, 2, axis=1), 2, axis=2)
    for c, r in enumerate(rates(session, noise).T):
        m, sd = r.mean(), r.std()
        kurtosis = ((r - m) ** 4).mean() / sd**4 if sd > 0 else float("nan")
        print(f"binary noise, cell {c}: mean {m:.3f} sd {sd:.3f} kurtosis {kurtosis:.1f}")
    flicker = np.repeat(rng.normal(0, 0.35, size=(FRAMES // 10, 1, 1)), 10, axis=0)[:FRAMES]
    flicker = (flicker * np.ones((1, 50, 50))).astype(np.float32)
    for c, r in enumerate(rates(session, flicker).T):
        print(f"full-field flicker (100 ms holds), cell {c}: mean {r.mean():.3f} sd {r.std():.3f}")
    for sd in [0.35, 0.12]:
        holds = rng.integers(1, 6, size=FRAMES)
        values = rng.normal(0, sd, size=FRAMES)
        trace = np.repeat(values, holds)[:FRAMES]
        movie = (trace[:, None, None] * np.ones((1, 50, 50))).astype(np.float32)
        for c, r in enumerate(rates(session, movie).T):
            print(f"flicker s.d. {sd} (1-5 frame holds), cell {c}: mean {r.mean():.3f} sd {r.std():.3f} max {r.max():.2f}")
    for rms in [0.25, 0.35, 0.5]:
        r = rates(session, reversing_texture(2000, rms, rng))[:, 1]
        print(f"reversing texture RMS {rms}, cell 1: above 1 in {(r > 1).mean():.1%} of frames, max {r.max():.2f}")
    print(f"onnxruntime {ort.__version__}, numpy {np.__version__}")


if __name__ == "__main__":
    main()
