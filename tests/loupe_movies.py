"""Invented movies for the loupe tests, generated frame by frame when read (nothing held), and
counting which frames were read.

The scene: a nickel-oxide platelet on a carbon membrane, its top edge a straight horizontal front.
At LAYER_FRAME one new atomic layer, one pixel high, grows on the edge over LAYER_X0..LAYER_X1.
Noise is Poisson-like: Gaussian with variance equal to the mean (the normal approximation).
"""

from __future__ import annotations

import numpy as np

from reviewer.movie.base import Movie, Timing

BACKGROUND = 1000.0  # counts on the membrane
PLATELET = 1600.0  # counts on the platelet
EDGE_Y = 1030  # first row of the platelet
LAYER_Y = EDGE_Y - 1  # the new layer's row
LAYER_X0, LAYER_X1 = 900, 1150
LAYER_FRAME = 20


class LayerMovie(Movie):
    """`n_frames` frames of `size` x `size`; frames from LAYER_FRAME on have the new layer."""

    def __init__(self, size: int = 2048, n_frames: int = 40, dtype=np.uint16, seed: int = 3,
                 path="layer.npy") -> None:
        from pathlib import Path

        super().__init__(path=Path(path), n_frames=n_frames, shape=(size, size),
                         dtype=np.dtype(dtype), layout="generated", timing=Timing(fps=10.0),
                         fingerprint=f"layer-{size}-{n_frames}-{np.dtype(dtype)}-{seed}")
        self.seed = seed
        self.reads: list[int] = []
        scale = size / 2048
        self.edge_y, self.layer_y = int(EDGE_Y * scale), int(EDGE_Y * scale) - 1
        self.layer_x = (int(LAYER_X0 * scale), int(LAYER_X1 * scale))

    def clean(self, i: int) -> np.ndarray:
        """The noiseless frame i (float64)."""
        h, w = self.shape
        img = np.full((h, w), BACKGROUND)
        img[self.edge_y:] = PLATELET
        if i >= LAYER_FRAME:
            img[self.layer_y, self.layer_x[0]:self.layer_x[1]] = PLATELET
        return img

    def _frame(self, i: int) -> np.ndarray:
        mean = self.clean(i)
        rng = np.random.default_rng((self.seed, i))
        noisy = mean + rng.standard_normal(mean.shape) * np.sqrt(mean)
        if self.dtype.kind == "f":
            return noisy.astype(self.dtype)
        if self.dtype == np.uint8:  # counts scaled to fit 8 bits
            return np.clip(noisy / 8, 0, 255).round().astype(np.uint8)
        return np.clip(noisy, 0, 65535).round().astype(self.dtype)

    def _read(self, start: int, stop: int) -> np.ndarray:
        self.reads.extend(range(start, stop))
        return np.stack([self._frame(i) for i in range(start, stop)])
