"""Pixel size where other writers store it: OME PhysicalSizeX with its unit and ImageJ's resolution
and unit (both written by tifffile), an HDF5 attribute (h5py), a Zarr attribute, the raw descriptor.
`reviewer info --json` reports it in nm; nothing stored -> null, never a guess."""

from __future__ import annotations

import json

import h5py
import numpy as np
import pytest
import tifffile
import zarr

from reviewer.cli import main
from reviewer.movie import open_movie
from reviewer.movie.scale import imagej_pixel_size_nm, ome_pixel_size_nm, to_nm

FRAMES = np.random.default_rng(0).integers(0, 500, (6, 16, 20), dtype=np.uint16)


def pixel_nm(capsys, path):
    assert main(["info", str(path), "--json"]) == 0, capsys.readouterr().err
    return json.loads(capsys.readouterr().out)["pixel_size_nm"]


@pytest.mark.parametrize(("size", "unit", "nm"), [(0.05, "nm", 0.05), (0.0021, "µm", 2.1),
                                                  (0.5, "Å", 0.05), (None, None, None)])
def test_ome_physical_size(tmp_path, capsys, size, unit, nm):
    p = tmp_path / "m.ome.tif"
    meta = {"axes": "TYX"}
    if size is not None:
        meta |= {"PhysicalSizeX": size, "PhysicalSizeXUnit": unit,
                 "PhysicalSizeY": size, "PhysicalSizeYUnit": unit}
    tifffile.imwrite(p, FRAMES, ome=True, metadata=meta)
    got = pixel_nm(capsys, p)
    assert got == (pytest.approx(nm, rel=1e-9) if nm else None)


def test_ome_default_unit_is_the_micrometre():
    # OME schema 2016-06: PhysicalSizeXUnit defaults to µm
    xml = ('<OME xmlns="http://www.openmicroscopy.org/Schemas/OME/2016-06"><Image ID="Image:0">'
           '<Pixels PhysicalSizeX="0.1" PhysicalSizeY="0.1" DimensionOrder="XYZCT" Type="uint8" '
           'SizeX="1" SizeY="1" SizeZ="1" SizeC="1" SizeT="1"/></Image></OME>')
    assert ome_pixel_size_nm(xml) == pytest.approx(100.0)
    assert ome_pixel_size_nm(xml.replace('PhysicalSizeY="0.1"', 'PhysicalSizeY="0.2"')) is None


def test_imagej_resolution_and_unit(tmp_path, capsys):
    p = tmp_path / "ij.tif"
    # ImageJ stores pixels per unit in XResolution and the unit in its description
    tifffile.imwrite(p, FRAMES, imagej=True, resolution=(1 / 0.25, 1 / 0.25),
                     metadata={"axes": "TYX", "unit": "nm"})
    assert pixel_nm(capsys, p) == pytest.approx(0.25, rel=1e-6)
    q = tmp_path / "ij_micron.tif"
    tifffile.imwrite(q, FRAMES, imagej=True, resolution=(500.0, 500.0),
                     metadata={"axes": "TYX", "unit": "micron"})
    assert pixel_nm(capsys, q) == pytest.approx(2.0, rel=1e-6)
    r = tmp_path / "ij_plain.tif"
    tifffile.imwrite(r, FRAMES, imagej=True, metadata={"axes": "TYX"})  # not calibrated
    assert pixel_nm(capsys, r) is None
    assert imagej_pixel_size_nm({"unit": "pixel"}, (4, 1)) is None


def test_hdf5_attribute_with_unit_on_the_dataset_or_a_group(tmp_path, capsys):
    p = tmp_path / "m.h5"
    with h5py.File(p, "w") as f:
        d = f.create_group("entry").create_dataset("frames", data=FRAMES)
        f["entry"].attrs["pixel_size"] = np.array([0.12])
        f["entry"].attrs["pixel_size_unit"] = "nm"
        d.attrs["fps"] = 100.0
    assert pixel_nm(capsys, p) == pytest.approx(0.12)
    q = tmp_path / "n.h5"
    with h5py.File(q, "w") as f:
        f.create_dataset("frames", data=FRAMES).attrs["pixel_size_nm"] = 0.3
    assert pixel_nm(capsys, q) == pytest.approx(0.3)
    r = tmp_path / "no_unit.h5"
    with h5py.File(r, "w") as f:
        f.create_dataset("frames", data=FRAMES).attrs["pixel_size"] = 0.3  # no unit: not guessed
    assert pixel_nm(capsys, r) is None


def test_zarr_attribute(tmp_path, capsys):
    p = tmp_path / "m.zarr"
    arr = zarr.open_array(str(p), mode="w", shape=FRAMES.shape, chunks=(1, 16, 20),
                          dtype=FRAMES.dtype)
    arr[...] = FRAMES
    arr.attrs.update({"pixel_size": 1.5, "units": "Å"})
    assert pixel_nm(capsys, p) == pytest.approx(0.15)


def test_raw_descriptor(tmp_path, capsys):
    data = tmp_path / "run.raw"
    FRAMES.tofile(data)
    desc = {"shape": [6, 16, 20], "dtype": "uint16", "byte_order": "little", "header_bytes": 0,
            "fps": 50.0, "pixel_size": 0.07}
    (tmp_path / "run.raw.json").write_text(json.dumps(desc))
    with open_movie(data) as m:
        assert m.pixel_size_nm == pytest.approx(0.07)
    (tmp_path / "run.raw.json").write_text(json.dumps(desc | {"pixel_unit": "seconds"}))
    assert main(["info", str(data)]) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "run.raw.json" in err and "pixel_size" in err


def test_to_nm_refuses_what_is_not_a_length():
    assert to_nm(2.0, "ms") is None and to_nm(0.0, "nm") is None and to_nm("x", "nm") is None
    assert to_nm(1.0, "pm") == pytest.approx(1e-3)
