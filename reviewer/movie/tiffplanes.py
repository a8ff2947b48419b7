"""Which TIFF pages are the movie's frames when a file holds more than time points: ImageJ hyperstacks
(channels and z-slices interleaved with the frames) and OME-TIFF images with C or Z, and OME files
with several images (series).

ImageJ stores planes with the channel fastest, then the slice, then the frame (ImageJ hyperstack
order "CZT"). OME-TIFF stores planes in the image's DimensionOrder (e.g. XYZCT: Z fastest, then C,
then T; OME data model, Pixels@DimensionOrder). Time is the frame axis; one channel and one z-plane
are read (`--channel`, `--z`; the first by default, with a notice).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from reviewer.errors import BadInput


@dataclass
class Planes:
    """How the pages of one image are laid out: sizes and the order of the non-image axes."""

    sizes: dict[str, int]  # {"T": .., "Z": .., "C": ..}
    fastest_first: str  # e.g. "CZT" (ImageJ) or "ZCT" (OME XYZCT)
    start: int = 0  # index (among the pages of the movie's geometry) of the image's first plane
    series: int | None = None  # OME image index
    series_count: int = 1
    notes: list[str] = field(default_factory=list)

    @property
    def axes(self) -> str:
        """Stored axes, slowest first, then YX, e.g. 'TZCYX'; axes of size 1 are left out."""
        return "".join(a for a in reversed(self.fastest_first) if self.sizes[a] > 1 or a == "T") + "YX"

    def plane(self, t: np.ndarray, z: int, c: int) -> np.ndarray:
        index = {"T": t, "Z": z, "C": c}
        out, scale = np.zeros_like(t), 1
        for a in self.fastest_first:
            out = out + index[a] * scale
            scale *= self.sizes[a]
        return self.start + out


def _time_from_stack_axis(planes: Planes, labels: dict[str, str]) -> Planes:
    """With no time axis stored (T = 1), the slowest of Z and C that has more than one plane is
    read as time: tifffile stores a plain 3-D stack as ImageJ channels or OME C, and many programs
    store a time series as z-slices (common practice, no source)."""
    if planes.sizes["T"] > 1:
        return planes
    slowest = [a for a in reversed(planes.fastest_first) if a in "ZC" and planes.sizes[a] > 1]
    if not slowest:
        return planes
    axis = slowest[0]
    planes.sizes["T"], planes.sizes[axis] = planes.sizes[axis], 1
    planes.fastest_first = planes.fastest_first.translate(str.maketrans({axis: "T", "T": axis}))
    planes.notes.append(f"no time axis stored: the {planes.sizes['T']} {labels[axis]} are read as "
                        "frames")
    return planes


def imagej_planes(md: dict | None) -> Planes | None:
    if not md:
        return None
    try:
        sizes = {"T": int(md.get("frames", 1) or 1), "Z": int(md.get("slices", 1) or 1),
                 "C": int(md.get("channels", 1) or 1)}
    except (TypeError, ValueError):
        return None
    if sizes["Z"] == 1 and sizes["C"] == 1:
        return None
    if sizes["T"] == 1 and md.get("images") and sizes["Z"] * sizes["C"] < int(md["images"]):
        sizes["T"] = int(md["images"]) // (sizes["Z"] * sizes["C"])
    return _time_from_stack_axis(Planes(sizes, "CZT"), {"Z": "slices", "C": "channels"})


def _images(ome: dict) -> list[dict]:
    image = ome.get("OME", {}).get("Image")
    return [image] if isinstance(image, dict) else list(image or [])


def ome_planes(ome: dict, height: int, width: int, samples: int, series: int | None,
               path: Path) -> Planes | None:
    """Planes of the OME image to read: --series, else the image of this frame size with most planes."""
    images = _images(ome)
    rows, listing = [], []
    for k, image in enumerate(images):
        px = image.get("Pixels") or {}
        try:
            sizes = {"T": int(px.get("SizeT", 1)), "Z": int(px.get("SizeZ", 1)),
                     "C": max(1, int(px.get("SizeC", 1)) // samples)}
            size_yx = (int(px.get("SizeY", 0)), int(px.get("SizeX", 0)))
        except (TypeError, ValueError):
            return None
        same = size_yx == (height, width)
        count = sizes["T"] * sizes["Z"] * sizes["C"]
        listing.append(f"{k}: {count} plane{'s' * (count != 1)} of {size_yx[0]}x{size_yx[1]}")
        order = str(px.get("DimensionOrder", "XYZCT")).upper()
        fastest = "".join(a for a in order[2:] if a in "TZC")
        if sorted(fastest) != ["C", "T", "Z"]:
            fastest = "ZCT"
        rows.append((k, sizes, fastest, same))
    if not rows:
        return None
    if series is not None:
        if not 0 <= series < len(rows):
            raise BadInput(f"{path}: --series {series} outside 0..{len(rows) - 1}")
        chosen = rows[series]
        if not chosen[3]:
            raise BadInput(f"{path}: series {series} has another frame size than the pages read")
    else:
        same = [r for r in rows if r[3]]
        if not same:
            return None
        chosen = max(same, key=lambda r: r[1]["T"] * r[1]["Z"] * r[1]["C"])
    k, sizes, fastest, _ = chosen
    start = sum(r[1]["T"] * r[1]["Z"] * r[1]["C"] for r in rows[:k] if r[3])
    planes = _time_from_stack_axis(Planes(sizes, fastest, start, series=k, series_count=len(rows)),
                                   {"Z": "z-planes", "C": "channels"})
    if len(rows) > 1 and series is None:
        planes.notes.append(f"{len(rows)} image series ({'; '.join(listing)}): reading series {k}, "
                            "the one with most frames (--series chooses another)")
    return planes


def choose(planes: Planes, offsets: np.ndarray, z: int | None, c: int | None, path: Path,
           notices: list[str]) -> tuple[np.ndarray, dict]:
    """Offsets of the time points of one (z, c) plane, and what was chosen."""
    picked = {}
    for axis, wanted, option, label in (("Z", z, "--z", "z-plane"), ("C", c, "--channel", "channel")):
        size = planes.sizes[axis]
        if wanted is None:
            if size > 1:
                notices.append(f"{size} {label}s: reading {label} 0 ({option} chooses another)")
            wanted = 0
        elif not 0 <= wanted < size:
            raise BadInput(f"{path}: {option} {wanted} outside 0..{size - 1}")
        if size > 1 or wanted:
            picked[{"Z": "z", "C": "channel"}[axis]] = wanted
    notices.extend(planes.notes)
    if planes.series is not None and planes.series_count > 1:
        picked["series"] = planes.series
    index = planes.plane(np.arange(planes.sizes["T"], dtype=np.int64), picked.get("z", 0),
                         picked.get("channel", 0))
    return offsets[index[index < len(offsets)]], picked
