"""Pixel size where files store it: OME PhysicalSizeX/Y with their units, the ImageJ resolution and
unit, an attribute of an HDF5 or Zarr array (or its groups), and the raw descriptor's
``pixel_size``. Every reader returns nanometres per pixel, or None when nothing usable is stored."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from collections.abc import Mapping

from reviewer.movie.arrays import positive_number

# metres per unit, as the units are spelled in OME (UnitsLength), ImageJ ('micron', '\u00B5m') and
# attributes people write; OME's default unit for PhysicalSize is the micrometre (OME schema 2016-06)
_UNITS = {"m": 1.0, "mm": 1e-3, "um": 1e-6, "µm": 1e-6, "μm": 1e-6, "micron": 1e-6,
          "microns": 1e-6, "micrometer": 1e-6, "micrometre": 1e-6, "nm": 1e-9, "nanometer": 1e-9,
          "nanometre": 1e-9, "pm": 1e-12, "picometer": 1e-12, "a": 1e-10, "å": 1e-10,
          "angstrom": 1e-10, "ångström": 1e-10}
ATTRIBUTE_KEYS = ("pixel_size_nm", "pixel_size", "pixelsize", "pixel_spacing", "pixel_width")
_PLAUSIBLE_NM = (1e-4, 1e9)  # 0.1 pm .. 1 m: anything else is a placeholder, not a pixel size


def to_nm(value, unit) -> float | None:
    """`value` (scalar, 1-element array or numeric text) in `unit` (a length unit's name) as
    nanometres; None when either is not usable."""
    if isinstance(unit, bytes):
        unit = unit.decode("utf-8", "replace")
    factor = _UNITS.get(str(unit).strip().lower()) if unit is not None else None
    number = positive_number(value)
    if number is None or factor is None:
        return None
    nm = number * factor * 1e9
    return nm if _PLAUSIBLE_NM[0] <= nm <= _PLAUSIBLE_NM[1] else None


def ome_pixel_size_nm(xml: str | None, series: int = 0) -> float | None:
    """PhysicalSizeX (and Y when it agrees) of the chosen OME image, in nm."""
    if not xml:
        return None
    try:
        root = ET.fromstring(xml)
    except ET.ParseError:
        return None
    images = [el for el in root.iter() if el.tag.rsplit("}", 1)[-1] == "Image"]
    if not images:
        return None
    image = images[min(series, len(images) - 1)]
    pixels = next((el for el in image if el.tag.rsplit("}", 1)[-1] == "Pixels"), None)
    if pixels is None or pixels.get("PhysicalSizeX") is None:
        return None
    x = to_nm(pixels.get("PhysicalSizeX"), pixels.get("PhysicalSizeXUnit", "µm"))
    if pixels.get("PhysicalSizeY") is not None:
        y = to_nm(pixels.get("PhysicalSizeY"), pixels.get("PhysicalSizeYUnit", "µm"))
        if y is None or x is None or abs(x - y) > 1e-6 * max(x, y):
            return None  # non-square pixels: no single pixel size to state
    return x


def imagej_pixel_size_nm(imagej: Mapping | None, x_resolution) -> float | None:
    """ImageJ: XResolution (pixels per unit, a TIFF rational) and the description's `unit`."""
    if not imagej or x_resolution is None:
        return None
    unit = imagej.get("unit")
    if unit is None:
        return None
    unit = str(unit).replace("\\u00B5", "µ")
    try:
        num, den = x_resolution if isinstance(x_resolution, tuple) else (x_resolution, 1)
        per_unit = float(num) / float(den)
    except (TypeError, ValueError, ZeroDivisionError):
        return None
    if not per_unit > 0 or per_unit == 1.0:  # 1 pixel per unit: ImageJ's "not calibrated"
        return None
    return to_nm(1.0 / per_unit, unit)


def attribute_pixel_size_nm(attr_sets: list[Mapping]) -> float | None:
    """The first attribute set (array, then its groups) holding a pixel size with a unit; a key
    ending in _nm needs none."""
    for attrs in attr_sets:
        lower = {str(k).lower(): k for k in attrs}
        for key in ATTRIBUTE_KEYS:
            if key not in lower:
                continue
            value = attrs[lower[key]]
            if key.endswith("_nm"):
                return to_nm(value, "nm")
            unit = next((attrs[lower[u]] for u in (f"{key}_unit", "pixel_unit", "spatial_unit",
                                                   "unit", "units") if u in lower), None)
            nm = to_nm(value, unit)
            if nm is not None:
                return nm
    return None
