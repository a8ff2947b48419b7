"""Where reviewer keeps caches, sessions and user settings.

- Cache (derived data, safe to delete): ``$REVIEWER_CACHE_DIR`` or ``$XDG_CACHE_HOME/reviewer``
  (default ``~/.cache/reviewer``), one folder per movie fingerprint.
- Sessions (review decisions): ``<movie>.review/`` beside the movie when it exists or the movie's folder
  is writable, else ``$REVIEWER_DATA_DIR`` or ``$XDG_DATA_HOME/reviewer/sessions/<fingerprint>``.
  A movie inside the cache (the demo sample) never keeps its session or exports there: both go to
  the user data folder, since the cache is safe to delete.
- Settings (key maps, label sets): ``$REVIEWER_CONFIG_DIR`` or ``$XDG_CONFIG_HOME/reviewer``.
"""

from __future__ import annotations

import os
import shutil
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


def in_cache(path: str | os.PathLike) -> bool:
    """The path lies inside the cache folder (derived data, safe to delete)."""
    try:
        Path(path).resolve().relative_to(cache_root().resolve())
    except ValueError:
        return False
    return True


def _move_out_of_cache(old: Path, new: Path) -> Path:
    """A session an earlier version kept beside a cached movie, moved to the data folder once (when
    no reviewer holds it); where the session now is."""
    if not old.is_dir() or new.exists() or (old / "lock").exists():  # store/lock.py LOCK
        return old if old.is_dir() and not new.exists() else new
    try:
        new.parent.mkdir(parents=True, exist_ok=True)
        shutil.move(old, new)
    except OSError:
        return old if old.is_dir() and not new.exists() else new
    return new


def session_dir(movie_path: str | os.PathLike, fingerprint: str,
                override: str | os.PathLike | None = None, create: bool = True) -> Path:
    """The session folder of one movie (made if missing when `create`; readers pass False).

    ``<movie>.review/`` beside the movie when it exists (even if it cannot be written: the session
    then opens read-only, never a blank one elsewhere); else the user data folder's session when one
    exists; else beside the movie when that folder is writable, else the user data folder. A movie in
    the cache always gets the user data folder's session."""
    if override is not None:
        path = Path(override).expanduser()
    else:
        movie = Path(movie_path).resolve()
        beside = movie.parent / (movie.name + ".review")
        elsewhere = data_root() / "sessions" / fingerprint
        if in_cache(movie):
            path = _move_out_of_cache(beside, elsewhere) if create else (
                beside if beside.is_dir() and not elsewhere.exists() else elsewhere)
        elif beside.is_dir():
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
    folder is writable and not in the cache, else in `fallback` (the session or cache folder)."""
    movie = Path(movie_path).resolve()
    name = movie_stem(movie) + suffix
    beside = _writable(movie.parent) and not in_cache(movie)
    return movie.parent / name if beside else Path(fallback) / name
