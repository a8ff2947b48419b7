"""Video files (MP4, AVI, MKV, MOV, WebM) through PyAV (optional extra ``video``).

Frames are the stream's luma plane Y' as the encoder stored it (the stream's own colour matrix;
RGB codecs are converted with the BT.601 weights by FFmpeg's swscale), uint8 or uint16 for deeper
formats. Frame times come from the presentation timestamps (a variable frame rate is kept). An index
of every frame's timestamp and of the keyframes is built once by reading the packets (no decoding)
and kept in the cache like the TIFF frame index; a frame is reached by seeking to the keyframe
before it and decoding forward. Sequential reads keep decoding without seeking.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from pathlib import Path

import numpy as np

from reviewer.errors import BadInput
from reviewer.movie.base import Movie, Timing
from reviewer.movie.extra import need_module
from reviewer.paths import cache_dir
from reviewer.progress import Progress

VIDEO_SUFFIXES = (".mp4", ".m4v", ".avi", ".mkv", ".mov", ".webm", ".mpg", ".mpeg", ".wmv")
LOSSLESS = {"ffv1", "huffyuv", "ffvhuff", "png", "rawvideo", "utvideo", "magicyuv", "qtrle", "v210"}
INDEX_VERSION = 1
PROGRESS_MIN_BYTES = 256 << 20
RECENT_BYTES = 64 << 20  # decoded frames kept for stepping back  # smaller files are indexed without a progress bar


def lossy_notice(codec: str) -> str:
    return (f"lossy video ({codec}): compression changes pixel values and noise statistics; "
            "counts are not Poisson, so detection thresholds are only approximate")


def _build_index(av, path: Path, stream_index: int,
                 show_progress: bool) -> tuple[np.ndarray, np.ndarray]:
    """(sorted pts of every frame, pts of every keyframe) from one pass over the packets."""
    pts, keys = [], []
    with av.open(str(path)) as container:
        stream = container.streams.video[stream_index]
        big = path.stat().st_size > PROGRESS_MIN_BYTES
        bar = Progress(int(stream.frames or 0), label="video frames indexed",
                       enabled=show_progress and big)
        for packet in container.demux(stream):
            if packet.pts is None or packet.size == 0:
                continue
            pts.append(packet.pts)
            if packet.is_keyframe:
                keys.append(packet.pts)
            if (len(pts) & 1023) == 0:
                bar.total = max(bar.total, len(pts))
                bar.update(len(pts))
        bar.total = len(pts)
        bar.update(len(pts))
        bar.close()
    return np.sort(np.array(pts, np.int64)), np.sort(np.array(keys, np.int64))


def _index(av, path: Path, stream_index: int, fingerprint: str,
           show_progress: bool) -> tuple[np.ndarray, np.ndarray, str]:
    folder = cache_dir(fingerprint) if fingerprint else None
    npz = folder / "video_index.npz" if folder else None
    if npz is not None and npz.is_file():
        try:
            with np.load(npz) as z:
                if int(z["version"]) == INDEX_VERSION:
                    return z["pts"], z["keys"], "cached frame index"
        except (OSError, ValueError, KeyError):
            pass
    pts, keys = _build_index(av, path, stream_index, show_progress)
    if npz is not None:
        try:
            tmp = npz.with_suffix(".tmp.npz")
            np.savez(tmp, version=INDEX_VERSION, pts=pts, keys=keys)
            tmp.replace(npz)
        except OSError:
            pass
    return pts, keys, "frame index built from the packets"


class VideoMovie(Movie):
    def __init__(self, av, path: Path, stream_index: int, pts: np.ndarray, keys: np.ndarray,
                 shape: tuple[int, int], gray: str, dtype: np.dtype, **kw) -> None:
        self._av, self._stream_index, self._gray = av, stream_index, gray
        self.pts, self.keys = pts, keys
        self._lock = threading.Lock()
        self._container = av.open(str(path))
        self._stream = self._container.streams.video[stream_index]
        self._frames = None  # decoding generator, positioned before frame self._next
        self._next = -1
        # frames decoded on the way from a keyframe are kept (bounded), so that stepping back one
        # frame at a time does not decode from the keyframe again each time
        self._recent: OrderedDict[int, np.ndarray] = OrderedDict()
        self._keep = max(8, RECENT_BYTES // max(1, shape[0] * shape[1] * np.dtype(dtype).itemsize))
        super().__init__(path=path, n_frames=len(pts), shape=shape, dtype=dtype, **kw)

    def _remember(self, at: int, frame: np.ndarray) -> None:
        self._recent[at] = frame
        self._recent.move_to_end(at)
        while len(self._recent) > self._keep:
            self._recent.popitem(last=False)

    def _seek(self, i: int) -> None:
        k = int(np.searchsorted(self.keys, self.pts[i], "right")) - 1
        target = int(self.keys[max(k, 0)]) if len(self.keys) else int(self.pts[0])
        self._container.seek(target, stream=self._stream, backward=True, any_frame=False)
        self._frames = self._container.decode(self._stream)
        self._next = -1  # unknown until a frame is decoded

    def _decode_next(self):
        frame = next(self._frames)
        self._next = int(np.searchsorted(self.pts, frame.pts)) + 1 if frame.pts is not None \
            else self._next + 1
        return frame

    def _read(self, start: int, stop: int) -> np.ndarray:
        out = np.empty((stop - start, *self.shape), self.dtype)
        with self._lock:
            if all(i in self._recent for i in range(start, stop)):
                for i in range(start, stop):
                    out[i - start] = self._recent[i]
                return out
            if self._frames is None or self._next != start:
                self._seek(start)
            i = start
            while i < stop:
                try:
                    frame = self._decode_next()
                except StopIteration:
                    raise BadInput(f"{self.path}: frame {i} cannot be read: the video ends "
                                   "before it") from None
                at = self._next - 1
                pixels = frame.to_ndarray(format=self._gray)
                self._remember(at, pixels)
                if at < i:
                    continue  # decoded on the way from the keyframe
                if at > i:
                    raise BadInput(f"{self.path}: frame {i} cannot be read: the decoder skipped it")
                out[i - start] = pixels
                i += 1
        return out

    def close(self) -> None:
        self._container.close()


def open_video(path: Path, fingerprint: str, show_progress: bool = True) -> Movie:
    av = need_module("av", path, "video", "video files")
    try:
        with av.open(str(path)) as container:
            if not container.streams.video:
                raise BadInput(f"{path}: the file holds no video stream")
            stream = container.streams.video[0]
            codec = stream.codec_context.name
            height, width = int(stream.codec_context.height), int(stream.codec_context.width)
            if stream.codec_context.format is None or not (height > 0 and width > 0):
                raise BadInput(f"{path}: the video stream has no readable frame format")
            pix = stream.codec_context.format.name
            time_base = float(stream.time_base) if stream.time_base else None
            rate = float(stream.average_rate) if stream.average_rate else None
    except av.error.FFmpegError as exc:
        raise BadInput(f"{path}: not a readable video file ({str(exc)[:80]})") from None
    deep = any(t in pix for t in ("10", "12", "16")) and "gray8" not in pix
    gray, dtype = ("gray16le", np.dtype(np.uint16)) if deep else ("gray", np.dtype(np.uint8))
    try:
        pts, keys, how = _index(av, path, 0, fingerprint, show_progress)
    except av.error.FFmpegError as exc:
        raise BadInput(f"{path}: the video packets cannot be read ({str(exc)[:80]})") from None
    if len(pts) == 0:
        raise BadInput(f"{path}: the video stream holds no frames")
    notices = [] if codec in LOSSLESS else [lossy_notice(codec)]
    timing = Timing()
    if time_base and len(pts) > 1:
        times = (pts - pts[0]).astype(np.float64) * time_base
        steps = np.diff(times)
        if np.all(steps > 0):
            if np.allclose(steps, steps[0], rtol=1e-6, atol=1.01 * time_base):
                # a constant rate (timestamps rounded to the time base): the stream's nominal rate
                # when it agrees to within one tick, else the mean step
                mean = float(np.mean(steps))
                fps = rate if rate and abs(1.0 / rate - mean) <= time_base else 1.0 / mean
                timing = Timing(fps=fps, source="video stream timestamps")
            else:
                timing = Timing(times_s=times, source="video stream timestamps (variable rate)")
    elif rate:
        timing = Timing(fps=rate, source="video stream frame rate")
    layout = f"video ({codec}, {pix}), {len(pts)} frames, luma plane, {how}"
    movie = VideoMovie(av, path, 0, pts, keys, (height, width), gray, dtype, layout=layout,
                       timing=timing, fingerprint=fingerprint, notices=notices)
    movie.axes = "TYX (luma)"
    return movie

