"""Readers added by installed packages, through the entry-point group ``reviewer.readers``.

A package registers a reader in its metadata, e.g. in its pyproject.toml::

    [project.entry-points."reviewer.readers"]
    ".sif" = "mypackage.reader:open_sif"

The entry-point name is the file suffix the reader handles (``".sif"``), or ``"*"`` for a reader
that is offered every file the built-in readers do not know. The function takes a `pathlib.Path`
and returns a `reviewer.movie.Movie` (or None: "not mine", the next reader is tried); it raises
`reviewer.errors.BadInput` for a file of its kind that it cannot read. Readers are tried after the
built-in ones, in the order Python lists the entry points.
"""

from __future__ import annotations

from importlib.metadata import entry_points
from pathlib import Path

from reviewer.errors import BadInput
from reviewer.movie.base import Movie

GROUP = "reviewer.readers"


def _suffix_of(path: Path) -> str:
    return "".join(path.suffixes[-2:]).lower() if len(path.suffixes) > 1 else path.suffix.lower()


def readers_for(path: Path) -> list:
    """Entry points that may read `path`: those named for its suffix first, then the ``*`` ones."""
    eps = list(entry_points(group=GROUP))
    suffixes = {path.suffix.lower(), _suffix_of(path)}
    return ([ep for ep in eps if ep.name.lower() in suffixes]
            + [ep for ep in eps if ep.name == "*"])


def open_with_plugins(path: Path) -> Movie | None:
    """The movie the first willing plug-in reader returns, or None when none takes the file."""
    for ep in readers_for(path):
        where = f"reader {ep.value} (entry point {ep.name!r} in {GROUP})"
        try:
            reader = ep.load()
            movie = reader(path)
        except BadInput:
            raise
        except Exception as exc:  # noqa: BLE001 - a third-party reader may raise anything
            text = str(exc).splitlines()[0][:100] if str(exc) else exc.__class__.__name__
            raise BadInput(f"{path}: {where} failed ({text})") from None
        if movie is None:
            continue
        if not isinstance(movie, Movie):
            raise BadInput(f"{path}: {where} returned {type(movie).__name__}, not a Movie")
        if movie.n_frames < 1:
            raise BadInput(f"{path}: {where} returned a movie without frames")
        movie.layout = f"{movie.layout} (plug-in {ep.value})"
        return movie
    return None
