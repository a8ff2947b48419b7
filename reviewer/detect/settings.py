"""Detection settings: every knob of the scan and of candidate proposal, JSON-able for provenance."""

from __future__ import annotations

from dataclasses import asdict, dataclass, fields

import numpy as np

from reviewer.errors import BadInput


@dataclass(frozen=True)
class DetectSettings:
    """Knobs of the scan (`SCAN_KEYS`: change them and the movie must be read again) and of
    `propose` (the rest: re-detection from saved features, no re-read).

    Threshold: `false_alarms` is the expected number of false alarms over the whole movie (the
    one knob; `reviewer scan --false-alarms N`). A frame is a candidate when its calibrated score
    z exceeds ``z* = Φ⁻¹(1 − a / 2N)``, N the number of frames and a = false_alarms × FA_GAIN ×
    the test's share of the budget (the step, pulse and level tests' shares sum to one; with
    `--patterns` the pattern test has a share of its own on top: see candidates.threshold_for and
    benchmarks/bench_false_alarms.py). `sensitivity` (deprecated, kept for `--sensitivity`)
    divides z* on top.
    """

    sensitivity: float = 1.0
    false_alarms: float = 0.05   # expected false alarms over the whole movie
    tile: int = 8                # tile side in pixels (frames are reduced to tile sums first)
    windows: tuple[int, ...] = (3, 10, 24)  # before/after window lengths in frames
    outer: int = 0               # trend windows outer × w frames long (0: plain after − before)
    read_block: int = 64         # frames read at a time
    chunk: int = 512             # frames scored at a time (bounded memory)
    separation: int = 3          # frames: peaks closer than this are one event
    global_fraction: float = 0.25  # share of tiles changed at once that makes a change global
    global_level: float = 0.02   # relative jump of the mean level that makes a change global
    blank_level: float = 0.3     # relative drop/rise of one frame's mean that marks it blanked
    jump_px: float = 1.0         # whole-field shift (px) between frames that marks a stage jump
    transient_max: int = 60      # frames: longest appear-and-leave pairing
    shoulder: float = 0.25       # a peak below this share of a stronger one nearby is its echo
    fronts: bool = False         # also read each tile through its edges (fronts.py; scan --dim-fronts)
    patterns: bool = False       # also test changes of pattern at 2x2 bins (pattern.py; scan --patterns)
    pattern_window: int = 8      # frames before/after for the pattern test

    SCAN_KEYS = ("tile", "windows", "outer", "read_block", "chunk", "blank_level", "fronts",
                 "patterns", "pattern_window")

    def __post_init__(self) -> None:
        if not self.sensitivity > 0:
            raise BadInput(f"sensitivity: must be a positive number, got {self.sensitivity}")
        if not (self.false_alarms > 0 and np.isfinite(self.false_alarms)):
            raise BadInput(f"false alarms: must be a positive number, got {self.false_alarms}")
        if self.tile < 2 or any(w < 1 for w in self.windows) or self.pattern_window < 1:
            raise BadInput("detector settings: tile must be >= 2 and windows >= 1")

    def to_dict(self) -> dict:
        d = asdict(self)
        d["windows"] = list(self.windows)
        return d

    @classmethod
    def from_dict(cls, d: dict) -> DetectSettings:
        known = {f.name for f in fields(cls)}
        d = dict(d)
        if "alpha" in d and "false_alarms" not in d:  # settings saved before the knob's rename
            d["false_alarms"] = d.pop("alpha")
        kw = {k: v for k, v in d.items() if k in known}
        if "windows" in kw:
            kw["windows"] = tuple(int(w) for w in kw["windows"])
        return cls(**kw)

    def scan_key(self) -> dict:
        """The settings that shape the saved features (same key: cached features can be reused)."""
        d = self.to_dict()
        return {k: d[k] for k in self.SCAN_KEYS}
