"""True-pixel drawing of the frame view (``--graphics kitty|sixel``): where the image goes in the
pane, its pixels with the mark burnt in, and the escape sequence that draws it (the encoders are in
tui/graphics.py); ``TruePixels`` is the part of the frame view that uses them.

The image is fitted, aspect kept, into the pane's pixel size (cells times the cell size in pixels the
terminal reports, else DEFAULT_CELL_PX) and placed on whole cells, centred.
"""

from __future__ import annotations

import numpy as np

from reviewer.tui import graphics, render

DEFAULT_CELL_PX = (10, 20)  # (width, height) of a cell when the terminal does not say
MAX_SIDE_PX = 4096
MARK_RGB = (255, 64, 200)  # the frame view's mark


def placement(region_h: int, region_w: int, rows: int, cols: int,
              cell_px: tuple[int, int]) -> tuple[int, int, int, int, int, int]:
    """(out_h, out_w, top, left, cell_rows, cell_cols): the image's pixel size and the block of
    cells (its first row and column in the pane, its size in cells) that shows it."""
    cw, ch = cell_px
    ph, pw = max(rows, 1) * ch, max(cols, 1) * cw
    scale = min(ph / region_h, pw / region_w, MAX_SIDE_PX / max(region_h, region_w))
    out_h = max(1, min(ph, int(round(region_h * scale))))
    out_w = max(1, min(pw, int(round(region_w * scale))))
    n_rows = min(rows, max(1, -(-out_h // ch)))
    n_cols = min(cols, max(1, -(-out_w // cw)))
    return out_h, out_w, (rows - n_rows) // 2, (cols - n_cols) // 2, n_rows, n_cols


def mark_mask(shape: tuple[int, int], y: float, x: float, size: int) -> np.ndarray:
    """Four corner brackets around pixel (y, x) of an image, ``size`` pixels from it."""
    h, w = shape
    mask = np.zeros(shape, dtype=bool)
    arm = max(2, size // 2)
    for sy in (-1, 1):
        for sx in (-1, 1):
            cy, cx = int(round(y + sy * size)), int(round(x + sx * size))
            y_lo, y_hi = sorted((cy, cy - sy * arm))
            x_lo, x_hi = sorted((cx, cx - sx * arm))
            if 0 <= cy < h:
                mask[cy, max(0, x_lo):max(0, x_hi + 1)] = True
            if 0 <= cx < w:
                mask[max(0, y_lo):max(0, y_hi + 1), cx] = True
    return mask


def sequence(kind: str, indices: np.ndarray, palette: str, mark: np.ndarray | None,
             screen_row: int, screen_col: int, cell_rows: int, cell_cols: int) -> str:
    """Cursor to the image's first cell (1-based in the escape), the image of uint8 palette
    indices (the mark in MARK_RGB), cursor back."""
    colours = render.palette_rgb(palette)
    if kind == "kitty":
        rgb = colours[indices]
        if mark is not None:
            rgb[mark] = MARK_RGB
        body = graphics.kitty_image(rgb, cell_cols, cell_rows)
    elif kind == "sixel":
        levels = graphics.SIXEL_LEVELS
        registers = graphics.grey_levels(indices, levels)
        ramp = np.rint(np.linspace(0, 255, levels)).astype(np.intp)
        table = np.vstack([colours[ramp], np.array([MARK_RGB], dtype=np.uint8)])
        if mark is not None:
            registers[mark] = levels
        body = graphics.sixel_image(registers, table)
    else:
        raise ValueError(f"no true-pixel drawing called {kind!r}")
    return f"\x1b7\x1b[{screen_row + 1};{screen_col + 1}H{body}\x1b8"


class TruePixels:
    """The frame view's true-pixel drawing (mixed into FrameView: uses its view and mark)."""

    def _pixel_placement(self, rows: int, cols: int) -> tuple[int, int, int, int, int, int]:
        if self._cell_px is None:
            from reviewer.tui.graphics_query import cell_pixels

            self._cell_px = cell_pixels() or DEFAULT_CELL_PX
        y0, y1, x0, x1 = self.view_region()
        return placement(y1 - y0, x1 - x0, rows, cols, self._cell_px)

    def pixel_image(self, rows: int, cols: int) -> tuple[np.ndarray, np.ndarray | None, tuple]:
        """For true-pixel drawing: the uint8 palette indices of the image at the pane's pixel
        size, the mask of the mark (None without one) and the placement (out_h, out_w, top, left,
        cell_rows, cell_cols)."""
        place = self._pixel_placement(rows, cols)
        out_h, out_w = place[:2]
        idx = self.indices(rows, cols, out_h, out_w)
        mask = None
        if self._mark is not None:
            y0, y1, x0, x1 = self.view_region()
            x, y = self._mark
            if x0 <= x < x1 and y0 <= y < y1:
                mask = mark_mask(
                    (out_h, out_w), (y + 0.5 - y0) * out_h / (y1 - y0),
                    (x + 0.5 - x0) * out_w / (x1 - x0), max(4, out_w // 40))
        return idx, mask, place

    def graphics_sequence(self, rows: int, cols: int, screen_row: int = 0,
                          screen_col: int = 0) -> str:
        """The escape sequence drawing the view in true pixels, the pane's top-left cell at
        (screen_row, screen_col) of the screen."""
        idx, mask, (_, _, top, left, n_rows, n_cols) = self.pixel_image(rows, cols)
        palette = "change" if self._mode == "change" else "grey"
        return sequence(self.graphics, idx, palette, mask, screen_row + top,
                                     screen_col + left, n_rows, n_cols)

    def _send_graphics(self) -> None:
        driver = getattr(self.app, "_driver", None)
        if self._sequence and driver is not None:
            driver.write(self._sequence)
