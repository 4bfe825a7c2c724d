#!/usr/bin/env python3
"""The attribution reference job written in JAX (a general-purpose autodiff library), for the
speed comparison in docs/performance.md. Same shapes as sufficit's benchmark
(benches/attribution.rs): reference model [N, 40, 50, 50] -> Conv 8@15x15 + softplus ->
Conv 8@11x11 + softplus -> Gemm to 4 cells + softplus; 100 windows of a binary white-noise movie;
gray (zero) baseline; cell 0 summed over the windows; conductance at layer 1 with 64 midpoint
steps. Variants, each jit-compiled and timed after a warm-up:

  naive      full forward and backward at every path point, steps batched 8 at a time
  prefix     conv1 once at the endpoints; layer-1 pre-activations interpolated (affine prefix)
  prefix+im2col  as prefix, with conv2 written as patches + one matrix product

    pip install "jax[cpu]==0.10.2" numpy
    python3 scripts/bench_attribution_jax.py
"""
import time

import jax
import jax.numpy as jnp
import numpy as np

STEPS, WINDOWS = 64, 100
rng = np.random.default_rng(0)
w1 = jnp.asarray(rng.uniform(-1, 1, (8, 40, 15, 15)) / np.sqrt(40 * 225), jnp.float32)
b1 = jnp.asarray(rng.uniform(-0.1, 0.1, 8), jnp.float32)
w2 = jnp.asarray(rng.uniform(-1, 1, (8, 8, 11, 11)) / np.sqrt(8 * 121), jnp.float32)
b2 = jnp.asarray(rng.uniform(-0.1, 0.1, 8), jnp.float32)
w3 = jnp.asarray(rng.uniform(-1, 1, (4, 8 * 26 * 26)) / np.sqrt(8 * 676), jnp.float32)
b3 = jnp.asarray(rng.uniform(-0.1, 0.1, 4), jnp.float32)
movie = rng.choice([-1.0, 1.0], size=(139, 50, 50)).astype(np.float32)
x = jnp.asarray(np.stack([movie[t - 39:t + 1] for t in range(39, 139)]))  # [100, 40, 50, 50]
DN = ("NCHW", "OIHW", "NCHW")


def conv(v, w, b):
    return jax.lax.conv_general_dilated(v, w, (1, 1), "VALID", dimension_numbers=DN) + b[None, :, None, None]


def conv_im2col(v, w, b):
    p = jax.lax.conv_general_dilated_patches(v, w.shape[2:], (1, 1), "VALID", dimension_numbers=DN)  # [N, C*kh*kw, H', W']
    return jnp.einsum("nkhw,ok->nohw", p, w.reshape(w.shape[0], -1)) + b[None, :, None, None]


# Everything is passed as an argument (never closed over), so XLA does not constant-fold the
# convolutions at compile time.
P = (w1, b1, w2, b2, w3, b3)


def suffix(y, p, conv2):
    _, _, w2, b2, w3, b3 = p
    h = jax.nn.softplus(conv2(y, w2, b2))
    return jnp.sum(jax.nn.softplus(h.reshape(h.shape[0], -1) @ w3.T + b3)[:, 0])


def layer1(v, p):
    return jax.nn.softplus(conv(v, p[0], p[1]))


@jax.jit
def naive_chunk(x, p, alphas_lo, alphas_mid, alphas_hi):
    # Conductance contribution [8] of a few path points, each with a full forward and backward.
    def one(a):
        lo, mid, hi = a
        gy = jax.grad(lambda y: suffix(y, p, conv))(layer1(mid * x, p))
        return jnp.sum(gy * (layer1(hi * x, p) - layer1(lo * x, p)), axis=(0, 2, 3))
    return jnp.sum(jax.lax.map(one, (alphas_lo, alphas_mid, alphas_hi)), axis=0)


def naive():
    total = jnp.zeros(8)
    k = jnp.arange(STEPS, dtype=jnp.float32)
    for s in range(0, STEPS, 8):
        kk = k[s:s + 8]
        total = total + naive_chunk(x, P, kk / STEPS, (kk + 0.5) / STEPS, (kk + 1) / STEPS)
    return total


def make_prefix(conv2):
    @jax.jit
    def run(x, p):
        z1 = conv(x, p[0], p[1])
        z0 = jnp.broadcast_to(p[1][None, :, None, None], z1.shape)
        dz = z1 - z0

        def step(k):
            lo, mid, hi = k / STEPS, (k + 0.5) / STEPS, (k + 1) / STEPS
            gy = jax.grad(lambda y: suffix(y, p, conv2))(jax.nn.softplus(z0 + mid * dz))
            dy = jax.nn.softplus(z0 + hi * dz) - jax.nn.softplus(z0 + lo * dz)
            return jnp.sum(gy * dy, axis=(0, 2, 3))
        return jnp.sum(jax.lax.map(step, jnp.arange(STEPS, dtype=jnp.float32)), axis=0)
    return lambda: run(x, P)


def timeit(name, f, repeats=5):
    jax.block_until_ready(f())  # compile + warm-up
    ts = []
    for _ in range(repeats):
        t = time.perf_counter()
        jax.block_until_ready(f())
        ts.append(time.perf_counter() - t)
    ts.sort()
    print(f"{name:<16} median {ts[len(ts) // 2]:.3f} s  best {ts[0]:.3f} s")


if __name__ == "__main__":
    print(f"jax {jax.__version__}, devices {jax.devices()}")
    timeit("prefix", make_prefix(conv))
    timeit("prefix+im2col", make_prefix(conv_im2col))
    timeit("naive", naive, repeats=3)
