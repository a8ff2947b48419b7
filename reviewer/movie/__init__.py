"""Reading movies: one read-only interface over every container (see `base.Movie`)."""

from reviewer.movie.base import ArrayMovie, Movie, Timing, fingerprint_file

__all__ = ["ArrayMovie", "Movie", "Timing", "fingerprint_file"]
