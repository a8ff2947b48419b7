"""Outputs never replace inputs, and appear whole or not at all.

Every command that writes files first calls `guard(outputs, inputs)`: each output path (sidecars
included) is compared with every file the command reads — the movie and the files that come with it
(raw descriptor ``<data>.json``, ``<movie>.times.csv``, the frames of a folder movie), an input table
and its sidecar — by identity (`os.path.samefile`, so symlinks and hard links count) and, for files not
there yet, by resolved path (an output named ``<movie>.times.csv`` would become an input next time).
Files of a review session (``journal.jsonl``, ``snapshot.json``, ... in a folder holding one) are
refused too. A clash is one `BadInput` line; nothing is written.

Then `replacing(*paths)` hands out one temporary file per output in that output's own folder; when
the block ends without an error each is fsynced, renamed over its target in the order given, and
the folders fsynced. Any error (disk full, file-size limit, permission) removes the temporary files
and leaves the earlier outputs untouched; it is raised as `WriteFailed`, one line naming the file.
"""

from __future__ import annotations

import contextlib
import errno
import json
import math
import os
import stat
import tempfile
from collections.abc import Iterable, Iterator
from pathlib import Path

from reviewer.errors import BadInput, printable

# What an output clashed with: (role shown to the user, path), e.g. ("the movie", Path("m.npy")).
Input = tuple[str, Path]


class WriteFailed(BadInput, OSError):
    """An output could not be written; the earlier file (if any) is unchanged. An OSError too, so
    callers that fall back to another folder on OSError keep doing so."""


def _same(a: Path, b: Path) -> bool:
    try:
        return os.path.samefile(a, b)
    except OSError:  # one of them is not there (yet): compare where they would be
        return os.path.realpath(a) == os.path.realpath(b)


def movie_files(movie=None, given: str | os.PathLike | None = None) -> list[Input]:
    """The files a movie is read from: the path given, the data file, a raw descriptor beside either,
    and a frame-times file beside either; for a folder movie, its frame files."""
    from reviewer.movie.timing import times_csv_path

    paths = [Path(p) for p in (given, getattr(movie, "path", None)) if p is not None]
    out: list[Input] = []
    for p in dict.fromkeys(paths):
        out.append(("the movie", p))
        if p.suffix.lower() == ".json":
            out.append(("the movie's raw data", p.with_suffix("")))
        else:
            out.append(("the movie's raw descriptor", p.with_name(p.name + ".json")))
        out.append(("the movie's frame times", times_csv_path(p)))
    out += [("a frame of the movie", Path(f)) for f in getattr(movie, "files", None) or ()]
    return out


def table_files(csv_path: str | os.PathLike) -> list[Input]:
    """An input event table and its JSON sidecar."""
    from reviewer.store.export import sidecar_path

    return [("the input table", Path(csv_path)),
            ("the input table's sidecar", sidecar_path(csv_path))]


def _session_names() -> set[str]:
    from reviewer.store.journal import JOURNAL, SNAPSHOT
    from reviewer.store.lock import LOCK
    from reviewer.store.meta import META

    return {JOURNAL, SNAPSHOT, META, LOCK}


def _session_file(path: Path, sessions: list[Path]) -> bool:
    """A file of a review session: in a session folder (one of `sessions`, a ``*.review`` folder or
    one holding a store file), named like one of the store's files (``snapshot.json.prev``,
    ``lock.<token>.tmp`` ... included)."""
    names = _session_names()
    folder = Path(os.path.realpath(path)).parent
    if not (folder.name.endswith(".review") or any(_same(folder, s) for s in sessions)
            or any((folder / n).exists() for n in names)):
        return False
    first = path.name.split(".")[0]
    return first in {n.split(".")[0] for n in names}


def _inside(path: Path, folder: Path) -> bool:
    real, top = Path(os.path.realpath(path)), Path(os.path.realpath(folder))
    return top in real.parents


def guard(outputs: Iterable[Path | tuple[Path, str]], inputs: Iterable[Input],
          sessions: Iterable[str | os.PathLike] = ()) -> None:
    """Refuse (BadInput) any output that is one of `inputs` or inside one that is a folder (a folder
    movie, the scan cache), a file of a session (in `sessions` or any other session folder), a
    folder itself, or in a folder that does not exist or cannot be written (`WriteFailed`).

    `outputs` are paths or (path, what it is) pairs, e.g. (Path("e.json"), "sidecar of e.csv")."""
    inputs, sessions = list(inputs), [Path(s) for s in sessions]
    for item in outputs:
        out, what = (item, "") if isinstance(item, os.PathLike | str) else item
        out = Path(out)
        name = printable(str(out)) + (f" ({what})" if what else "")
        for role, path in inputs:
            if _same(out, path):
                also = "" if os.path.normpath(out) == os.path.normpath(path) else \
                    f" {printable(str(path))}"
                raise BadInput(f"{name}: is {role}{also}; refusing to overwrite it "
                               "(choose another output name)")
            if Path(path).is_dir() and _inside(out, path):
                raise BadInput(f"{name}: inside {role} {printable(str(path))}; refusing to "
                               "write there (choose another output folder)")
        if _session_file(out, sessions):
            raise BadInput(f"{name}: named like a file of the review session there; refusing to write it "
                           "(choose another output name)")
        if out.is_dir():
            raise BadInput(f"{name}: is a folder, not a file name")
        parent = Path(os.path.realpath(out)).parent
        if not parent.is_dir():
            raise BadInput(f"{name}: folder {printable(str(out.parent))} does not exist")
        _refuse_protected(out, name)
        if not os.access(parent, os.W_OK | os.X_OK):  # before any long work; an OSError as well,
            raise WriteFailed(f"{name}: cannot write (folder {printable(str(out.parent))} is "
                              "not writable)")  # so callers may fall back to another folder


def _refuse_protected(path: Path, name: str) -> None:
    """A write-protected file stays protected, although a rename could replace it."""
    if os.path.exists(path) and not os.access(path, os.W_OK):
        raise WriteFailed(f"{name}: cannot write (the file is write-protected)")


_WHY = {errno.ENOSPC: "the disk is full", errno.EDQUOT: "the disk quota is exceeded",
        errno.EFBIG: "file too large for the file-size limit", errno.EROFS: "read-only file system",
        errno.EACCES: "permission denied", errno.EPERM: "permission denied"}


def reason(exc: OSError) -> str:
    """A short reason for an OSError ("the disk is full", "permission denied", ...)."""
    return _WHY.get(exc.errno or 0) or exc.strerror or str(exc) or exc.__class__.__name__


def _mode(target: Path) -> int:
    """Permissions of the new file: those of the file it replaces, else 0666 minus the umask."""
    try:
        return stat.S_IMODE(os.stat(target).st_mode)
    except OSError:
        mask = os.umask(0)
        os.umask(mask)
        return 0o666 & ~mask


def _fsync_dir(folder: Path) -> None:
    with contextlib.suppress(OSError):  # some file systems cannot fsync a folder
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


@contextlib.contextmanager
def replacing(*paths: str | os.PathLike) -> Iterator[list[Path]]:
    """Temporary files for `paths` (same folders); renamed over them, in the order given, when the
    block succeeds. Put the file that announces the others last (see store.export). An output that
    is a symlink is written through: the file it points to is replaced, the link stays."""
    shown = [Path(p) for p in paths]  # the names the user gave, for messages
    targets = [Path(os.path.realpath(p)) for p in paths]
    for p in shown:
        _refuse_protected(p, printable(str(p)))
    temps: list[Path] = []
    try:
        for t in targets:
            fd, name = tempfile.mkstemp(prefix=f".{t.name}.", suffix=".part", dir=t.parent)
            os.close(fd)
            temps.append(Path(name))
        yield temps
        for tmp, t in zip(temps, targets, strict=True):
            fd = os.open(tmp, os.O_RDONLY)
            try:
                os.fchmod(fd, _mode(t))
                os.fsync(fd)
            finally:
                os.close(fd)
        for tmp, t in zip(temps, targets, strict=True):
            os.replace(tmp, t)
        for folder in dict.fromkeys(t.parent for t in targets):
            _fsync_dir(folder)
    except OSError as exc:
        _remove(temps)
        if isinstance(exc, WriteFailed):
            raise
        by_temp = {os.fspath(tmp): p for tmp, p in zip(temps, shown, strict=False)}
        where = (shown[len(temps)] if len(temps) < len(targets)  # no temporary file could be made
                 else by_temp.get(os.fspath(exc.filename or ""), shown[-1]))
        raise WriteFailed(f"{printable(str(where))}: cannot write ({reason(exc)})") from exc
    except BaseException:
        _remove(temps)
        raise


@contextlib.contextmanager
def opened(tmp: Path, mode: str = "w", **kw) -> Iterator:
    """open() for a temporary file of `replacing`, whose write errors name that file (so the
    error names the right output when several are written)."""
    try:
        with open(tmp, mode, **kw) as f:
            yield f
    except OSError as exc:
        if exc.filename is None:
            exc.filename = os.fspath(tmp)
        raise


def _remove(temps: list[Path]) -> None:
    for tmp in temps:
        with contextlib.suppress(OSError):
            tmp.unlink()


def finite(obj):
    """A copy of a JSON-able value with every NaN or infinite float replaced by None."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: finite(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [finite(v) for v in obj]
    return obj


def json_text(obj, **kw) -> str:
    """Strict JSON (no NaN or Infinity: such values become null)."""
    return json.dumps(finite(obj), allow_nan=False, **kw)


def json_bytes(obj) -> bytes:
    """UTF-8 strict JSON for a file. A file name that is not UTF-8 (held as surrogates) is written
    as its JSON escape (\\udcXX), which json.loads and os.fsencode turn back into the same bytes."""
    text = json_text(obj, ensure_ascii=False, indent=2)
    return text.encode("utf-8", "backslashreplace")
