"""Open, reopen and random frame reads on a generated page-per-frame TIFF (default 200,000 pages).

    python benchmarks/bench_movie_open.py [--pages 200000] [--dir /fast/tmp] [--keep]

Writes one IFD + one 64x64 uint16 frame per page (the layout acquisition software streams), then prints:
write time; first open (frame-index build) and reopen, each as `reviewer info --json` wall time in a fresh
subprocess and as `open_movie` alone; median and p95 of 1,000 random frame reads; peak RSS, anonymous
memory and bytes read by read() calls per step, against the file size. Targets (issue 2): reopen <= 1 s,
median read <= 5 ms, no step reads or copies the whole file. The file is deleted afterwards (--keep keeps
it). Caches are warm (the file was just written): cold-disk numbers will be slower.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import struct
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

H = W = 64
FRAME_BYTES = H * W * 2
IFD_BYTES = 128  # 2 + 10 entries * 12 + 4 = 126, padded to a word boundary
PAGE = IFD_BYTES + FRAME_BYTES

# (tag, type, value) for a classic little-endian TIFF page: TIFF 6.0 baseline greyscale tags.
TAGS = [(256, 4, W), (257, 4, H), (258, 3, 16), (259, 3, 1), (262, 3, 1), (273, 4, 0), (277, 3, 1),
        (278, 4, H), (279, 4, FRAME_BYTES), (339, 3, 1)]


def ifd_template() -> np.ndarray:
    buf = bytearray(struct.pack("<H", len(TAGS)))
    for tag, typ, value in TAGS:
        packed = struct.pack("<H", value) + b"\0\0" if typ == 3 else struct.pack("<I", value)
        buf += struct.pack("<HHI", tag, typ, 1) + packed
    buf += b"\0\0\0\0" + b"\0" * (IFD_BYTES - len(buf) - 4)
    return np.frombuffer(bytes(buf), np.uint8)


STRIP_AT = 2 + 5 * 12 + 8  # value field of tag 273 (the sixth entry)
NEXT_AT = 2 + len(TAGS) * 12


def stamp(index: np.ndarray, base: np.ndarray) -> np.ndarray:
    """Frames whose first two pixels hold the frame number (so every read can be checked)."""
    frames = np.repeat(base[None], len(index), axis=0)
    frames[:, 0, 0] = index & 0xFFFF
    frames[:, 0, 1] = index >> 16
    return frames


def write_tiff(path: Path, pages: int, chunk: int = 4096) -> None:
    template = ifd_template()
    base = np.random.default_rng(0).integers(100, 4000, (H, W), dtype=np.uint16)
    with open(path, "wb") as f:
        f.write(b"II*\0" + struct.pack("<I", 8))
        for start in range(0, pages, chunk):
            idx = np.arange(start, min(start + chunk, pages), dtype=np.int64)
            block = np.empty((len(idx), PAGE), np.uint8)
            block[:, :IFD_BYTES] = template
            at = 8 + idx * PAGE
            block[:, STRIP_AT:STRIP_AT + 4] = (at + IFD_BYTES).astype("<u4").view(np.uint8).reshape(-1, 4)
            nxt = np.where(idx + 1 < pages, at + PAGE, 0).astype("<u4")
            block[:, NEXT_AT:NEXT_AT + 4] = nxt.view(np.uint8).reshape(-1, 4)
            block[:, IFD_BYTES:] = stamp(idx, base).astype("<u2").view(np.uint8).reshape(len(idx), -1)
            f.write(block.tobytes())


CHILD = r"""
import json, sys, time
def io():
    return int(dict(l.split(":", 1) for l in open("/proc/self/io"))["rchar"])
t0 = time.perf_counter()
mode, path = sys.argv[1], sys.argv[2]
from reviewer.cli import main
from reviewer.movie import open_movie
t1, r1 = time.perf_counter(), io()
if mode == "cli":
    rc = main(["info", "--json", path])
else:
    m = open_movie(path); print(json.dumps({"frames": m.n_frames, "layout": m.layout})); m.close(); rc = 0
t2, r2 = time.perf_counter(), io()
st = dict(l.split(":", 1) for l in open("/proc/self/status") if ":" in l)
kb = lambda k: int(st[k].split()[0]) * 1024
print(json.dumps({"import_s": t1 - t0, "work_s": t2 - t1, "peak_rss": kb("VmHWM"), "anon": kb("RssAnon"),
                  "read_bytes": r2 - r1}), file=sys.stderr)
sys.exit(rc)
"""


def child(mode: str, path: Path, env: dict) -> dict:
    t = time.perf_counter()
    out = subprocess.run([sys.executable, "-c", CHILD, mode, str(path)], capture_output=True, text=True,
                         env=env)
    wall = time.perf_counter() - t
    if out.returncode != 0:
        raise SystemExit(f"child failed: {out.stderr[-2000:]}")
    stats = json.loads(out.stderr.strip().splitlines()[-1])
    stats["wall_s"] = wall
    stats.update(json.loads(out.stdout))
    return stats


def mb(n: float) -> str:
    return f"{n / 2**20:,.1f} MiB"


def row(name: str, s: dict, size: int) -> None:
    print(f"{name}: wall {s['wall_s']:.3f} s = imports {s['import_s']:.3f} s + work {s['work_s']:.3f} s;"
          f" read() during work {mb(s['read_bytes'])} ({s['read_bytes'] / size:.2%} of the file);"
          f" peak RSS {mb(s['peak_rss'])}, anonymous {mb(s['anon'])}\n    layout: {s['layout']}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--pages", type=int, default=200_000)
    ap.add_argument("--dir", default=None, help="folder for the generated file (default: a temp folder)")
    ap.add_argument("--keep", action="store_true", help="keep the generated file")
    args = ap.parse_args()
    work = Path(tempfile.mkdtemp(prefix="bench_movie_", dir=args.dir))
    path, cache = work / "pages.tif", work / "cache"
    env = dict(os.environ, REVIEWER_CACHE_DIR=str(cache))
    os.environ["REVIEWER_CACHE_DIR"] = str(cache)
    try:
        t = time.perf_counter()
        write_tiff(path, args.pages)
        size = path.stat().st_size
        wt = time.perf_counter() - t
        print(f"wrote {args.pages:,} pages of {H}x{W} uint16, {mb(size)} in {wt:.1f} s "
              f"({size / wt / 2**20:,.0f} MiB/s)")
        print("baseline: python + `import reviewer.cli`, no movie:")
        base = subprocess.run([sys.executable, "-c", "import time; t=time.perf_counter(); "
                               "import reviewer.cli, reviewer.movie; print(time.perf_counter()-t)"],
                              capture_output=True, text=True, env=env)
        print(f"  import time {float(base.stdout):.3f} s")
        first = child("cli", path, env)
        assert first["frames"] == args.pages, first
        row("first open, `reviewer info --json` (builds the index)", first, size)
        row("reopen, `reviewer info --json`", child("cli", path, env), size)
        row("reopen, open_movie() alone", child("open", path, env), size)
        shutil.rmtree(cache)
        row("first open again, open_movie() alone", child("open", path, env), size)
        for f in cache.glob("*/frames.json"):
            print(f"    index: {f.read_text()}")
        walk_fallback(path)
        reads(path, args.pages)
    finally:
        if args.keep:
            print(f"kept {path}")
        else:
            shutil.rmtree(work, ignore_errors=True)


def walk_fallback(path: Path) -> None:
    """The IFD walk used when no constant stride is found, timed on the same file."""
    from reviewer.movie import pageindex
    from reviewer.movie.tiffifd import page_info, read_header, read_ifd

    fd = os.open(path, os.O_RDONLY)
    try:
        size = os.fstat(fd).st_size
        hdr = read_header(fd)
        ref = page_info(read_ifd(fd, hdr, hdr.first_ifd, size))
        t = time.perf_counter()
        index = pageindex.walk(fd, hdr, size, ref, "data", show_progress=False)
        el = time.perf_counter() - t
    finally:
        os.close(fd)
    print(f"IFD walk (fallback when no constant stride): {len(index.offsets):,} IFDs in {el:.2f} s "
          f"({el / len(index.offsets) * 1e6:.1f} us an IFD)")


def _status() -> dict:
    with open("/proc/self/status") as f:
        st = dict(line.split(":", 1) for line in f if ":" in line)
    return {k: int(st[k].split()[0]) * 1024 for k in ("VmHWM", "RssAnon", "RssFile")}


def reads(path: Path, pages: int) -> None:
    from reviewer.movie import open_movie

    m = open_movie(path)
    m.frame(0)
    s0 = _status()
    rng = np.random.default_rng(7)
    picks = rng.integers(0, pages, 1000)
    times = np.empty(len(picks))
    for k, i in enumerate(picks):
        t = time.perf_counter()
        f = m.frame(int(i))
        times[k] = time.perf_counter() - t
        assert int(f[0, 0]) + (int(f[0, 1]) << 16) == i, "wrong frame"
    s1 = _status()
    t = time.perf_counter()
    for s in rng.integers(0, pages - 64, 20):
        b = m.block(int(s), int(s) + 64)
        assert int(b[-1, 0, 0]) + (int(b[-1, 0, 1]) << 16) == s + 63
    block_ms = (time.perf_counter() - t) / 20 * 1e3
    m.close()
    print(f"1,000 random frame reads: median {np.median(times) * 1e3:.3f} ms, "
          f"p95 {np.percentile(times, 95) * 1e3:.3f} ms, max {times.max() * 1e3:.2f} ms "
          f"(target: median <= 5 ms); 20 random 64-frame blocks: {block_ms:.2f} ms each")
    print(f"memory across the 1,000 reads: anonymous {mb(s0['RssAnon'])} -> {mb(s1['RssAnon'])}, "
          f"mapped file pages {mb(s0['RssFile'])} -> {mb(s1['RssFile'])} "
          f"(1,000 frames = {mb(1000 * FRAME_BYTES)}; file {mb(path.stat().st_size)})")


if __name__ == "__main__":
    main()
