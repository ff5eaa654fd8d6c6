"""Synthetic beat train shared by the conditioning-stage tests (invented data)."""

from __future__ import annotations

import numpy as np


def ijk_train(duration_s: float, fs: float, rng: np.random.Generator) -> np.ndarray:
    """Synthetic I-J-K complex (three Gaussians) at ~60 bpm with 5 % RR jitter."""
    n = int(duration_s * fs)
    beats = np.cumsum(rng.normal(1.0, 0.05, int(duration_s * 2)))
    beats = beats[beats < duration_s - 1.0]
    imp = np.zeros(n)
    imp[(beats * fs).astype(int)] = 1.0
    kt = np.arange(-0.3, 0.3, 1.0 / fs)
    kern = (-0.4 * np.exp(-(((kt + 0.08) / 0.03) ** 2)) + np.exp(-((kt / 0.03) ** 2))
            - 0.6 * np.exp(-(((kt - 0.08) / 0.035) ** 2)))
    return np.convolve(imp, kern, mode="same")
