#!/usr/bin/python3
"""Writes the .npy/.npz fixtures of tests/Search.Tests/Evaluation with NumPy itself.

Run with Debian's NumPy:  /usr/bin/python3 tests/Search.Tests/Fixtures/make_fixtures.py
Every value comes from a formula the C# tests recompute, except the metric cases, whose inputs are
seeded random numbers stored in the files next to the values NumPy computes from them.
"""
import os

import numpy as np

OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "numpy")
SHAPE = (2, 3, 4)
N = 24


def values(kind):
    """The formula per dtype family; the C# side (NumpyFixtureTests.Expected) mirrors it."""
    i = np.arange(N)
    if kind == "f":
        return (i * 0.25 - 3).reshape(SHAPE)
    if kind == "i8":
        return (i * 123456789013 - 1500000000000).reshape(SHAPE)
    if kind == "i":
        return (i * 7 - 20).reshape(SHAPE)
    if kind == "i1":
        return ((i * 11) % 256 - 128).reshape(SHAPE)
    if kind == "u1":
        return ((i * 11) % 256).reshape(SHAPE)
    if kind == "b1":
        return (i % 3 == 0).reshape(SHAPE)
    raise ValueError(kind)


def save(name, array, **kwargs):
    path = os.path.join(OUT, name)
    with open(path, "wb") as f:
        np.lib.format.write_array(f, array, allow_pickle=kwargs.pop("allow_pickle", False), **kwargs)


def main():
    os.makedirs(OUT, exist_ok=True)
    for descr, kind in [("f4", "f"), ("f2", "f"), ("f8", "f"), ("i8", "i8"), ("i4", "i")]:
        for order, tag in [("<", "le"), (">", "be")]:
            save(f"{descr}_{tag}.npy", values(kind).astype(order + descr))
    save("i1.npy", values("i1").astype("i1"))
    save("u1.npy", values("u1").astype("u1"))
    save("b1.npy", values("b1").astype("?"))

    # Header versions: 2.0 has a 4-byte header length; 3.0 also allows a UTF-8 header.
    save("f4_v2.npy", values("f").astype("<f4"), version=(2, 0))
    save("f4_v3.npy", values("f").astype("<f4"), version=(3, 0))

    # Fortran order: same logical values, column-major bytes on disk.
    save("f4_fortran.npy", np.asfortranarray(values("f").astype("<f4")))
    save("i4_fortran_be.npy", np.asfortranarray(values("i").astype(">i4")))

    save("f8_scalar.npy", np.array(2.5, dtype="<f8"))
    save("i8_vector.npy", np.arange(5, dtype="<i8") * 3 - 4)
    save("f4_empty.npy", np.zeros((0, 3), dtype="<f4"))

    # Types we refuse.
    save("c8.npy", values("f").astype("<c8"))
    save("object.npy", np.array([1, "two", None], dtype=object), allow_pickle=True)
    save("unicode.npy", np.array(["abc", "de"], dtype="<U3"))
    save("structured.npy", np.zeros(3, dtype=[("a", "<f4"), ("b", "<i4")]))
    # A field name outside Latin-1 is what version 3.0 exists for; the header is then UTF-8.
    save("structured_v3.npy", np.zeros(2, dtype=[("\u03c0", "<f4")]), version=(3, 0))

    x = values("f").astype("<f4")
    labels = np.array([1, 0], dtype="<i8")
    np.savez(os.path.join(OUT, "plain.npz"), x=x, labels=labels)
    np.savez_compressed(os.path.join(OUT, "compressed.npz"), x=x, labels=labels)

    bad = np.arange(4 * 2 * 3, dtype="<f4").reshape(4, 2, 3)
    bad[3, 1, 2] = np.nan
    np.savez(os.path.join(OUT, "nan.npz"), x=bad)

    # Metric cases: NumPy computes every metric in float64 from the float32 values stored beside it.
    rng = np.random.default_rng(20240611)
    ref = (rng.standard_normal((6, 4, 10)) * 3).astype("<f4")
    trial = (ref + rng.standard_normal(ref.shape) * 0.3).astype("<f4")
    np.savez(os.path.join(OUT, "metrics_logits.npz"), reference=ref, trial=trial, expected=expected(ref, trial, softmax=True))

    p = softmax(ref.astype(np.float64)).astype("<f4")
    q = softmax(trial.astype(np.float64)).astype("<f4")
    np.savez(os.path.join(OUT, "metrics_probabilities.npz"), reference=p, trial=q, expected=expected(p, q, softmax=False))
    streaming()
    logit_space()
    compensated_rounding()


def streaming():
    """A stateful model's dataset: frames [n, 8], a recurrent state with its samples on axis 1
    [2, n, 6], and a scalar int64 sample rate (a 0-d array: a constant fed to every run). The held-out
    set has louder frames than the calibration set, so a budget met on one can miss on the other."""
    rng = np.random.default_rng(7)
    for name, n, loudness in (("streaming.npz", 40, 1.0), ("streaming_holdout.npz", 24, 3.0)):
        frame = (loudness * rng.standard_normal((n, 8))).astype("<f4")
        state = (0.5 * rng.standard_normal((2, n, 6))).astype("<f4")
        np.savez(os.path.join(OUT, name), frame=frame, state=state, rate=np.array(16000, dtype="<i8"))


def logit_space():
    """SQNR in logit space, computed by NumPy in float64: sigmoid outputs as log(p / (1 - p)), softmax
    rows as log p minus the row mean, p clipped to [1e-6, 1 - 1e-6] (OutputComparer.LogitEpsilon)."""
    eps = 1e-6
    rng = np.random.default_rng(31)
    z = rng.standard_normal((60, 1)) * 6
    p = (1 / (1 + np.exp(-z))).astype("<f4")
    q = (1 / (1 + np.exp(-(z + rng.standard_normal(z.shape) * 0.05)))).astype("<f4")

    def sigmoid_logit(x):
        x = np.clip(x.astype(np.float64), eps, 1 - eps)
        return np.log(x / (1 - x))

    def centred_log(x):
        x = np.log(np.clip(x.astype(np.float64), eps, 1 - eps))
        return x - x.mean(axis=-1, keepdims=True)

    def sqnr(r, t):
        return 10 * np.log10(np.sum(r ** 2) / np.sum((r - t) ** 2))

    logits = rng.standard_normal((20, 5)) * 4
    sp = softmax(logits).astype("<f4")
    sq = softmax(logits + rng.standard_normal(logits.shape) * 0.05).astype("<f4")
    np.savez(os.path.join(OUT, "metrics_logit_space.npz"),
             sigmoid_reference=p, sigmoid_trial=q, sigmoid_sqnr=np.array(sqnr(sigmoid_logit(p), sigmoid_logit(q))),
             softmax_reference=sp, softmax_trial=sq, softmax_sqnr=np.array(sqnr(centred_log(sp), centred_log(sq))))


# (rows, columns, samples, bits, scheme, per_channel): a block edge (300 columns > 128), an always-zero input,
# a wide asymmetric per-tensor case, and the 2..8-bit corners.
GPTQ_CASES = [
    (6, 20, 64, 4, "symmetric", True),
    (5, 300, 400, 3, "symmetric", True),
    (4, 40, 80, 2, "asymmetric", True),
    (8, 17, 50, 8, "asymmetric", False),
    (3, 130, 200, 5, "symmetric", False),
]


def grid(w, bits, scheme):
    """Scale and zero point of a min-max range, in float32 step for step as AffineParameters computes them."""
    if scheme == "symmetric":
        qmin, qmax = -(2 ** (bits - 1) - 1), 2 ** (bits - 1) - 1
        s = np.float32(np.abs(w).max()) / np.float32(qmax)
        return (s if s > 0 else np.float32(1)), 0, qmin, qmax
    qmin, qmax = 0, 2 ** bits - 1
    low, high = min(np.float32(w.min()), np.float32(0)), max(np.float32(w.max()), np.float32(0))
    s = np.float32((np.float64(high) - np.float64(low)) / (qmax - qmin))
    z = int(np.clip(np.round(np.float32(qmin) - np.float32(low) / s), qmin, qmax))
    return s, z, qmin, qmax


def gptq(w, x, bits, scheme, per_channel):
    """The published update written out directly (Frantar et al., 2022, Algorithm 1, from memory), one column at a
    time with no lazy blocks: H = 2 X^T X, dead inputs H_ii = 1, damping 1% of the mean diagonal, U = upper Cholesky
    factor of H^-1, then q_i = quant(w_i), err = (w_i - q_i) / U_ii, W[:, i+1:] -= err U[i, i+1:]. The quantizer is
    QuantizeLinear's: float32 division, clamp, round half to even."""
    rows, cols = w.shape
    h = 2 * x.astype(np.float64).T @ x.astype(np.float64)
    dead = np.diag(h) <= 0
    h[dead, dead] = 1
    h += 0.01 * np.mean(np.diag(h)) * np.eye(cols)
    u = np.linalg.cholesky(np.linalg.inv(h)).T
    grids = [grid(w[r], bits, scheme) for r in range(rows)] if per_channel else [grid(w, bits, scheme)] * rows
    s = np.array([g[0] for g in grids], dtype=np.float32)
    z = np.array([g[1] for g in grids])
    qmin, qmax = grids[0][2], grids[0][3]
    low, high = (qmin - z).astype(np.float32), (qmax - z).astype(np.float32)
    work = w.astype(np.float64).copy()
    levels = np.zeros((rows, cols), dtype=np.int32)
    for i in range(cols):
        step = np.round(np.clip(work[:, i].astype(np.float32) / s, low, high))
        levels[:, i] = step.astype(np.int32) + z
        err = (work[:, i] - (step.astype(np.float32) * s).astype(np.float64)) / u[i, i]
        work[:, i + 1:] -= np.outer(err, u[i, i + 1:])
    return levels


def compensated_rounding():
    """Weights, calibration inputs and the levels the direct NumPy update picks (GPTQ_CASES)."""
    rng = np.random.default_rng(1322)
    arrays = {}
    for n, (rows, cols, samples, bits, scheme, per_channel) in enumerate(GPTQ_CASES):
        w = rng.standard_normal((rows, cols)).astype("<f4")
        # Correlated inputs (a random mixing of independent ones), as real activations are.
        x = (rng.standard_normal((samples, cols)) @ rng.standard_normal((cols, cols)) * 0.3).astype("<f4")
        if n == 0:
            x[:, 3] = 0
        arrays[f"case{n}_weight"] = w
        arrays[f"case{n}_inputs"] = x
        arrays[f"case{n}_levels"] = gptq(w, x, bits, scheme, per_channel)
        arrays[f"case{n}_setting"] = np.array([bits, scheme == "asymmetric", per_channel], dtype="<i4")
    np.savez(os.path.join(OUT, "compensated_rounding.npz"), **arrays)


def softmax(x):
    e = np.exp(x - x.max(axis=-1, keepdims=True))
    return e / e.sum(axis=-1, keepdims=True)


def expected(ref, trial, softmax):
    """[relative MSE, SQNR dB, top-1 agreement, mean KL(ref || trial), mean cosine] in float64."""
    r = ref.astype(np.float64).reshape(-1, ref.shape[-1])
    t = trial.astype(np.float64).reshape(-1, ref.shape[-1])
    rel = ((t - r) ** 2).sum() / (r ** 2).sum()
    sqnr = -10 * np.log10(rel)
    top1 = (r.argmax(axis=1) == t.argmax(axis=1)).mean()
    if softmax:
        log_p = r - r.max(axis=1, keepdims=True)
        log_p -= np.log(np.exp(log_p).sum(axis=1, keepdims=True))
        log_q = t - t.max(axis=1, keepdims=True)
        log_q -= np.log(np.exp(log_q).sum(axis=1, keepdims=True))
        kl = (np.exp(log_p) * (log_p - log_q)).sum(axis=1).mean()
    else:
        kl = (r * (np.log(r) - np.log(t))).sum(axis=1).mean()
    cos = ((r * t).sum(axis=1) / np.linalg.norm(r, axis=1) / np.linalg.norm(t, axis=1)).mean()
    return np.array([rel, sqnr, top1, kl, cos], dtype="<f8")


if __name__ == "__main__":
    main()
