"""Where reviewer keeps caches, sessions and user settings.

- Cache (derived data, safe to delete): ``$REVIEWER_CACHE_DIR`` or ``$XDG_CACHE_HOME/reviewer``
  (default ``~/.cache/reviewer``), one folder per movie fingerprint.
- Sessions (review decisions): ``<movie>.review/`` beside the movie when it exists or the movie's folder
  is writable, else ``$REVIEWER_DATA_DIR`` or ``$XDG_DATA_HOME/reviewer/sessions/<fingerprint>``.
- Settings (key maps, label sets): ``$REVIEWER_CONFIG_DIR`` or ``$XDG_CONFIG_HOME/reviewer``.
"""

from __future__ import annotations

import os
from pathlib import Path


def _xdg(var: str, own: str, default: str) -> Path:
    if os.environ.get(own):
        return Path(os.environ[own]).expanduser()
    base = os.environ.get(var) or str(Path.home() / default)
    return Path(base).expanduser() / "reviewer"


def cache_root() -> Path:
    return _xdg("XDG_CACHE_HOME", "REVIEWER_CACHE_DIR", ".cache")


def data_root() -> Path:
    return _xdg("XDG_DATA_HOME", "REVIEWER_DATA_DIR", ".local/share")


def config_root() -> Path:
    return _xdg("XDG_CONFIG_HOME", "REVIEWER_CONFIG_DIR", ".config")


def cache_dir(fingerprint: str, create: bool = True) -> Path:
    """The cache folder of one movie, keyed by its fingerprint."""
    path = cache_root() / fingerprint
    if create:
        path.mkdir(parents=True, exist_ok=True)
    return path


def _writable(folder: Path) -> bool:
    return folder.is_dir() and os.access(folder, os.W_OK | os.X_OK)


def session_dir(movie_path: str | os.PathLike, fingerprint: str,
                override: str | os.PathLike | None = None, create: bool = True) -> Path:
    """The session folder of one movie (made if missing when `create`; readers pass False).

    ``<movie>.review/`` beside the movie when it exists (even if it cannot be written: the session
    then opens read-only, never a blank one elsewhere); else the user data folder's session when one
    exists; else beside the movie when that folder is writable, else the user data folder."""
    if override is not None:
        path = Path(override).expanduser()
    else:
        movie = Path(movie_path).resolve()
        beside = movie.parent / (movie.name + ".review")
        elsewhere = data_root() / "sessions" / fingerprint
        if beside.is_dir():
            path = beside
        elif elsewhere.is_dir() or beside.exists() or not _writable(movie.parent):
            path = elsewhere
        else:
            path = beside
    if create:
        path.mkdir(parents=True, exist_ok=True)
    return path


def movie_stem(movie_path: str | os.PathLike) -> str:
    """A movie's name without its extension (``run07.ome.tif`` -> ``run07``; a folder keeps its name)."""
    path = Path(movie_path)
    name = path.name
    for ext in (".ome.tiff", ".ome.tif"):
        if name.lower().endswith(ext):
            return name[: -len(ext)]
    return path.stem if path.is_file() else name


def output_beside(movie_path: str | os.PathLike, suffix: str, fallback: str | os.PathLike) -> Path:
    """Default place of a file derived from a movie: ``<stem><suffix>`` beside the movie when that
    folder is writable, else in `fallback` (the session or cache folder)."""
    movie = Path(movie_path).resolve()
    name = movie_stem(movie) + suffix
    return movie.parent / name if _writable(movie.parent) else Path(fallback) / name
