"""Detection settings: every knob of the scan and of candidate proposal, JSON-able for provenance."""

from __future__ import annotations

from dataclasses import asdict, dataclass, fields

from reviewer.errors import BadInput


@dataclass(frozen=True)
class DetectSettings:
    """Knobs of the scan (`SCAN_KEYS`: change them and the movie must be read again) and of
    `propose` (the rest: re-detection from saved features, no re-read).

    Threshold: a frame is a candidate when its calibrated score z exceeds
    ``z* / sensitivity`` with ``z* = Φ⁻¹(1 − alpha / 2N)`` and N the number of frames, so the whole
    movie's expected number of false alarms is ``alpha`` at sensitivity 1. Sensitivity 2 halves the
    threshold (more recall, more false alarms); 0.5 doubles it.
    """

    sensitivity: float = 1.0
    alpha: float = 0.05          # expected false alarms over the whole movie at sensitivity 1
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

    SCAN_KEYS = ("tile", "windows", "outer", "read_block", "chunk", "blank_level")

    def __post_init__(self) -> None:
        if not self.sensitivity > 0:
            raise BadInput(f"sensitivity: must be a positive number, got {self.sensitivity}")
        if not self.alpha > 0:
            raise BadInput(f"alpha: must be positive, got {self.alpha}")
        if self.tile < 2 or any(w < 1 for w in self.windows):
            raise BadInput("detector settings: tile must be >= 2 and windows >= 1")

    def to_dict(self) -> dict:
        d = asdict(self)
        d["windows"] = list(self.windows)
        return d

    @classmethod
    def from_dict(cls, d: dict) -> DetectSettings:
        known = {f.name for f in fields(cls)}
        kw = {k: v for k, v in d.items() if k in known}
        if "windows" in kw:
            kw["windows"] = tuple(int(w) for w in kw["windows"])
        return cls(**kw)

    def scan_key(self) -> dict:
        """The settings that shape the saved features (same key: cached features can be reused)."""
        d = self.to_dict()
        return {k: d[k] for k in self.SCAN_KEYS}
