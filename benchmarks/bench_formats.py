"""Random-frame access per format: the same movie written by each outside writer, then opened and read.

    python benchmarks/bench_formats.py [--frames 300] [--size 512] [--reads 200] [--dir /fast/tmp]

For every format the movie layer reads (tifffile contiguous / page-per-frame / PackBits pages / OME,
h5py plain and Blosc, zarr, NumPy .npy and .npz, mrcfile, PyAV H.264) it prints: file size, open time
(`open_movie`, fresh index: the cache folder is a new temporary one per format), median and p95 of
random single-frame reads, and sequential read throughput in MB/s of decoded pixels, side by side with
`numpy.fromfile` (and a sum, as every read here touches its pixels) of the same pixels from a raw file (the floor). Formats whose library is missing are
skipped with a line. The video reader keeps up to 64 MiB of decoded frames, so at small sizes its
random reads mostly hit frames decoded on the way (use --size 2048 to see seeks). Caches are warm (the files were just written): cold-disk numbers are slower.
"""

from __future__ import annotations

import argparse
import os
import shutil
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np
import tifffile


def movie(n: int, size: int) -> np.ndarray:
    rng = np.random.default_rng(0)
    return rng.poisson(12.0, (n, size, size)).astype(np.uint16)


def writers():
    def tiff_contiguous(p, m):
        tifffile.imwrite(p, m)

    def tiff_pages(p, m):
        with tifffile.TiffWriter(p) as w:
            for f in m:
                w.write(f, contiguous=False, metadata=None)

    def tiff_packbits(p, m):
        with tifffile.TiffWriter(p) as w:
            for f in m:
                w.write(f, compression="packbits", contiguous=False, metadata=None)

    def ome(p, m):
        tifffile.imwrite(p, m, ome=True, metadata={"axes": "TYX"})

    def hdf5(p, m):
        import h5py
        with h5py.File(p, "w") as f:
            f.create_dataset("frames", data=m, chunks=(1, *m.shape[1:]))

    def hdf5_blosc(p, m):
        import h5py
        import hdf5plugin
        with h5py.File(p, "w") as f:
            f.create_dataset("frames", data=m, chunks=(1, *m.shape[1:]), **hdf5plugin.Blosc())

    def zarr_array(p, m):
        import zarr
        zarr.open_array(str(p), mode="w", shape=m.shape, chunks=(1, *m.shape[1:]),
                        dtype=m.dtype)[...] = m

    def npy(p, m):
        np.save(p, m)

    def npz(p, m):
        np.savez(p, movie=m)

    def mrc(p, m):
        import mrcfile
        with mrcfile.new(p) as f:
            f.set_data(m)
            f.set_image_stack()

    def mp4(p, m):
        import av
        scaled = np.clip(m * 8, 0, 255).astype(np.uint8)
        with av.open(str(p), "w") as c:
            s = c.add_stream("libx264", rate=100)
            s.width, s.height, s.pix_fmt = m.shape[2], m.shape[1], "yuv420p"
            for f in scaled:
                for packet in s.encode(av.VideoFrame.from_ndarray(f, format="gray")):
                    c.mux(packet)
            for packet in s.encode():
                c.mux(packet)

    return [("tiff contiguous", "c.tif", tiff_contiguous), ("tiff pages", "p.tif", tiff_pages),
            ("tiff packbits", "pb.tif", tiff_packbits), ("ome-tiff", "o.ome.tif", ome),
            ("hdf5", "m.h5", hdf5), ("hdf5 blosc", "b.h5", hdf5_blosc),
            ("zarr", "m.zarr", zarr_array), ("npy", "m.npy", npy), ("npz", "m.npz", npz),
            ("mrc", "m.mrc", mrc), ("mp4 h264", "m.mp4", mp4)]


def size_of(p: Path) -> int:
    if p.is_dir():
        return sum(f.stat().st_size for f in p.rglob("*") if f.is_file())
    return p.stat().st_size


def measure(p: Path, n: int, reads: int) -> tuple[float, float, float, float]:
    from reviewer.movie import open_movie

    t = time.perf_counter()
    m = open_movie(p)
    opened = time.perf_counter() - t
    try:
        order = np.random.default_rng(1).integers(0, n, reads)
        times = []
        for i in order:
            t = time.perf_counter()
            np.asarray(m.frame(int(i))).sum(dtype=np.uint64)
            times.append(time.perf_counter() - t)
        t = time.perf_counter()
        for start in range(0, n, 32):
            np.asarray(m.block(start, min(n, start + 32))).sum(dtype=np.uint64)  # touch pixels
        seq = time.perf_counter() - t
    finally:
        m.close()
    times.sort()
    return opened, statistics.median(times), times[int(0.95 * (len(times) - 1))], seq


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--frames", type=int, default=300)
    ap.add_argument("--size", type=int, default=512)
    ap.add_argument("--reads", type=int, default=200)
    ap.add_argument("--dir", default=None)
    a = ap.parse_args()
    root = Path(tempfile.mkdtemp(prefix="bench-formats-", dir=a.dir))
    os.environ["XDG_CACHE_HOME"] = str(root / "cache")
    try:
        m = movie(a.frames, a.size)
        mb = m.nbytes / 1e6
        raw = root / "raw.bin"
        m.tofile(raw)
        t = time.perf_counter()
        np.fromfile(raw, np.uint16).sum(dtype=np.uint64)
        raw_s = time.perf_counter() - t
        print(f"{a.frames} frames of {a.size}x{a.size} uint16 ({mb:.0f} MB of pixels); "
              f"raw read {raw_s * 1e3:.0f} ms = {mb / raw_s:.0f} MB/s")
        print(f"{'format':16} {'file MB':>8} {'open ms':>8} {'read med ms':>12} {'p95 ms':>8} "
              f"{'seq MB/s':>9} {'seq / raw':>9}")
        for name, filename, write in writers():
            p = root / filename
            try:
                write(p, m)
            except ImportError as e:
                print(f"{name:16} skipped: {e.name} not installed")
                continue
            os.environ["XDG_CACHE_HOME"] = str(root / f"cache-{filename}")  # a fresh index each
            opened, med, p95, seq = measure(p, a.frames, a.reads)
            print(f"{name:16} {size_of(p) / 1e6:8.1f} {opened * 1e3:8.1f} {med * 1e3:12.2f} "
                  f"{p95 * 1e3:8.2f} {mb / seq:9.0f} {seq / raw_s:9.1f}x")
    finally:
        shutil.rmtree(root, ignore_errors=True)


if __name__ == "__main__":
    main()
