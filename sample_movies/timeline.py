"""Planning a movie: when and where every event happens, the stage path and the beam current.

The plan is drawn from one seeded generator before any frame is drawn, so the ground truth is
known up front and chunked rendering reproduces it exactly.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from sample_movies.scene import Front, membrane_texture

if TYPE_CHECKING:
    from sample_movies.growth import Scenario

TRUTH_COLUMNS = ["frame", "frame_end", "kind", "what", "x", "y"]
PAD = 8  # canvas margin around every view position, px


@dataclass
class Event:
    frame: int
    what: str
    source: str  # "front0", "front1", "other": events of one front keep min_wait apart
    duration: int = 1
    frame_end: int | None = None
    x: float = math.nan
    y: float = math.nan
    action: tuple | None = None  # what the renderer does at `frame`


@dataclass
class Particle:
    frame: int
    frame_end: int
    y0: float
    x0: float
    vy: float
    vx: float
    radius: float
    contrast: float

    def position(self, t: int) -> tuple[float, float]:
        k = t - self.frame
        return self.y0 + k * self.vy, self.x0 + k * self.vx


@dataclass
class Plan:
    offsets: np.ndarray  # (n, 2) float64: canvas (y, x) of view pixel (0, 0) in each frame
    beam: np.ndarray  # (n,) float64: relative beam current (blanked frames near 0)
    texture: np.ndarray  # membrane canvas, float32
    fronts: list[Front]
    initial_islands: list[tuple[float, float, float, float]]  # (cy, cx, radius, contrast)
    actions: list[tuple[int, tuple]] = field(default_factory=list)  # (frame, action), sorted
    particles: list[Particle] = field(default_factory=list)
    flow_px_per_frame: float = 0.0
    truth: pd.DataFrame = field(default_factory=lambda: empty_truth())


def empty_truth() -> pd.DataFrame:
    return pd.DataFrame({
        "frame": pd.Series([], dtype="int64"), "frame_end": pd.Series([], dtype="Int64"),
        "kind": pd.Series([], dtype=object), "what": pd.Series([], dtype=object),
        "x": pd.Series([], dtype="float64"), "y": pd.Series([], dtype="float64")})


def _count(rate_per_10k: float, n_frames: int) -> int:
    return int(round(rate_per_10k * n_frames / 1e4))


def smooth_wander(rng: np.random.Generator, n: int, period: float, k: int = 4) -> np.ndarray:
    """A slow random curve over n frames with values in [-1, 1] (sum of a few long sines)."""
    t = np.arange(n, dtype=np.float64)
    out = np.zeros(n)
    for _ in range(k):
        p = period * rng.uniform(1.0, 4.0)
        out += rng.uniform(0.5, 1.0) * np.sin(2 * np.pi * t / p + rng.uniform(0, 2 * np.pi))
    peak = np.abs(out).max() if n else 0.0
    return out / peak if peak > 0 else out


def _event_times(sc: Scenario, rng: np.random.Generator) -> list[Event]:
    """Draw every event's frame, then push events apart so none crowd each other."""
    n, m = sc.n_frames, sc.quiet_frames
    events: list[Event] = []
    if sc.layer_events and sc.n_fronts:
        shape = sc.wait_shape
        for k in range(sc.n_fronts):
            t = m + rng.gamma(shape, sc.mean_wait / shape) * rng.uniform(0.2, 1.0)
            while t < n - m:
                events.append(Event(int(t), "layer", f"front{k}"))
                t += max(sc.min_wait, rng.gamma(shape, sc.mean_wait / shape))
    kinds = [("nucleation", sc.nucleations_per_10k), ("dissolution", sc.dissolutions_per_10k),
             ("particle", sc.transients_per_10k), ("blank", sc.blanks_per_10k),
             ("beam_step", sc.beam_steps_per_10k), ("stage_jump", sc.stage_jumps_per_10k)]
    for what, rate in kinds:
        for _ in range(_count(rate, n)):
            dur = int(rng.integers(2, 6)) if what == "particle" else 1
            events.append(Event(int(rng.integers(m, max(n - m - dur, m + 1))), what, "other",
                                duration=dur))
    events.sort(key=lambda e: (e.frame, e.what))
    out: list[Event] = []
    last_end = {"_any": -10**9}
    for e in events:
        t = max(e.frame, last_end["_any"] + sc.min_gap + 1)
        if e.source != "other":
            t = max(t, last_end.get(e.source, -10**9) + sc.min_wait)
        if t + e.duration > n - m:
            continue
        e.frame = t
        last_end["_any"] = t + e.duration - 1
        last_end[e.source] = t
        out.append(e)
    return out


def make_plan(sc: Scenario, seed: int) -> Plan:
    rng = np.random.default_rng([int(seed), 1])
    n, h, w = sc.n_frames, sc.height, sc.width
    events = _event_times(sc, rng)

    # Facets: platelets entering from the bottom edge, growing upwards, side by side.
    nf = sc.n_fronts
    length = min(sc.front_len_px, 0.8 * w / max(nf, 1))
    facets = []  # (view y, view x, angle)
    for k in range(nf):
        facets.append((sc.front_start * h + rng.uniform(-2, 2), (k + 0.5) * w / nf,
                       np.deg2rad(rng.uniform(-12, 12))))
    # Layer segments and the advance each front makes over the movie.
    profiles = [np.zeros(int(np.ceil(length))) for _ in range(nf)]
    for e in events:
        if e.what == "layer":
            k = int(e.source[5:])
            nb = len(profiles[k])
            seg = int(round(nb * rng.uniform(sc.segment_min, 1.0)))
            lo = int(rng.integers(0, nb - seg + 1))
            mid_before = float(profiles[k][lo:lo + seg].mean())
            profiles[k][lo:lo + seg] += sc.step_px
            e.action = ("layer", k, lo, lo + seg, sc.step_px, mid_before)
    flow = sc.flow_px_per_frame
    advance = max([p.max() for p in profiles] + [0.0]) + flow * n
    room = (sc.front_start - 0.25) * h
    track = max(0.0, advance - room) / max(n, 1)  # the operator follows the fronts upwards

    # Stage path (relative): slow drift + wander + following + jumps.
    t = np.arange(n, dtype=np.float64)
    ang = rng.uniform(0, 2 * np.pi)
    rel = np.empty((n, 2))
    rel[:, 0] = sc.drift_px_per_frame * np.sin(ang) * t - track * t
    rel[:, 1] = sc.drift_px_per_frame * np.cos(ang) * t
    if sc.drift_wander_px > 0:
        rel[:, 0] += sc.drift_wander_px * smooth_wander(rng, n, sc.wander_period)
        rel[:, 1] += sc.drift_wander_px * smooth_wander(rng, n, sc.wander_period)
    beam = np.ones(n)
    if sc.beam_wander > 0:
        beam *= 1.0 + sc.beam_wander * smooth_wander(rng, n, sc.wander_period)
    for e in events:
        if e.what == "stage_jump":
            a = rng.uniform(0, 2 * np.pi)
            rel[e.frame:, 0] += sc.jump_px * np.sin(a)
            rel[e.frame:, 1] += sc.jump_px * np.cos(a)
        elif e.what == "beam_step":
            beam[e.frame:] *= rng.choice([-1, 1]) * sc.beam_step + 1.0
        elif e.what == "blank":
            beam[e.frame:e.frame + e.duration] = sc.blank_level
            e.frame_end = e.frame + e.duration - 1
    offsets = rel - rel.min(axis=0) + PAD if n else rel
    canvas_shape = (int(np.ceil(offsets[:, 0].max())) + h + PAD + 2,
                    int(np.ceil(offsets[:, 1].max())) + w + PAD + 2) if n else (h + 2 * PAD,
                                                                              w + 2 * PAD)
    texture = membrane_texture(rng, canvas_shape, sc.texture_contrast, sc.texture_scale_px)

    fronts = []
    for (vy, vx, angle) in facets:
        fronts.append(Front(cy=vy + offsets[0, 0], cx=vx + offsets[0, 1], angle=angle,
                            length=length, contrast=sc.platelet_contrast))
    finals = [Front(f.cy, f.cx, f.angle, f.length, f.contrast, profile=p + flow * n)
              for f, p in zip(fronts, profiles, strict=True)]

    islands: list[tuple[float, float, float]] = []  # every island ever placed (cy, cx, r)

    def free_spot(frame: int, radius: float) -> tuple[float, float] | None:
        for _ in range(200):
            vy, vx = rng.uniform(radius + 6, h - radius - 6), rng.uniform(radius + 6, w - radius - 6)
            cy, cx = vy + offsets[frame, 0], vx + offsets[frame, 1]
            clear = all(_clear_of(f, cy, cx, radius + 4) for f in finals)
            apart = all(math.hypot(cy - y, cx - x) > radius + r + 4 for y, x, r in islands)
            if clear and apart:
                return cy, cx
        return None

    initial: list[tuple[float, float, float, float]] = []
    actions: list[tuple[int, tuple]] = []
    particles: list[Particle] = []
    rows = []
    for e in events:
        f = e.frame
        if e.what == "layer":
            _, k, lo, hi, step, before = e.action
            fr = fronts[k]
            cy, cx = fr.point(before + step / 2, (lo + hi) / 2 - fr.length / 2)
            e.y, e.x = cy - offsets[f, 0], cx - offsets[f, 1]
            actions.append((f, e.action))
        elif e.what in ("nucleation", "dissolution"):
            r = rng.uniform(1.8, 3.2)
            spot = free_spot(f, r)
            if spot is None:
                continue
            islands.append((spot[0], spot[1], r))
            e.y, e.x = spot[0] - offsets[f, 0], spot[1] - offsets[f, 1]
            if e.what == "nucleation":
                actions.append((f, ("island", spot[0], spot[1], r, sc.island_contrast)))
            else:
                initial.append((spot[0], spot[1], r, sc.island_contrast))
                actions.append((f, ("unisland", spot[0], spot[1], r)))
        elif e.what == "particle":
            ang = rng.uniform(0, 2 * np.pi)
            speed = rng.uniform(2.0, 5.0)
            vy, vx = speed * np.sin(ang), speed * np.cos(ang)
            y0 = np.clip(rng.uniform(8, h - 8) - vy * (e.duration - 1) / 2, 4, h - 4)
            x0 = np.clip(rng.uniform(8, w - 8) - vx * (e.duration - 1) / 2, 4, w - 4)
            p = Particle(f, f + e.duration - 1, y0, x0, vy, vx, rng.uniform(2.0, 3.0),
                         sc.particle_contrast)
            particles.append(p)
            pos = np.array([p.position(t) for t in range(p.frame, p.frame_end + 1)])
            e.y, e.x = float(pos[:, 0].mean()), float(pos[:, 1].mean())
            e.frame_end = p.frame_end
        kind = {"layer": "step", "nucleation": "step", "dissolution": "step",
                "particle": "transient"}.get(e.what, "global")
        rows.append((e.frame, e.frame_end, kind, e.what, e.x, e.y))
    truth = empty_truth()
    if rows:
        truth = pd.DataFrame(rows, columns=TRUTH_COLUMNS)
        truth["frame"] = truth["frame"].astype("int64")
        truth["frame_end"] = truth["frame_end"].astype("Int64")
        truth[["x", "y"]] = truth[["x", "y"]].astype("float64")
        truth = truth.sort_values("frame", kind="stable").reset_index(drop=True)
    actions.sort(key=lambda a: a[0])
    return Plan(offsets=offsets, beam=beam, texture=texture, fronts=fronts,
                initial_islands=initial, actions=actions, particles=particles,
                flow_px_per_frame=flow, truth=truth)


def _clear_of(front: Front, cy: float, cx: float, margin: float) -> bool:
    """True when a disc of radius `margin` at (cy, cx) stays off the platelet (final state)."""
    u, v = front.uv(np.array(cy), np.array(cx))
    half = front.length / 2
    if abs(float(v)) > half + margin + 2 * front.edge_px:
        return True
    return float(u) > float(front.profile.max()) + margin + 2 * front.edge_px
