"""Reading movies: one read-only interface over every container (see `base.Movie`).

`open_movie(path, fps=None)` picks the reader: TIFF (ImageJ, contiguous, page-per-frame, BigTIFF,
OME, compressed), NumPy .npy, folders of numbered PNG/TIFF frames, raw binary + JSON descriptor,
HDF5 and Zarr (optional extras).
"""

from reviewer.movie.base import ArrayMovie, Movie, Timing, fingerprint_file
from reviewer.movie.open import open_movie

__all__ = ["ArrayMovie", "Movie", "Timing", "fingerprint_file", "open_movie"]
