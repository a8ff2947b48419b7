"""Durability of the review session against a power cut, not only against a killed process.

A SIGKILL cannot show a missing fsync: what a killed process wrote is still in the page cache and
reaches the disk anyway. A power cut loses everything that was not synced. These tests run the
public Session API (Session.open, accept/reject/label/add/undo, seed, close) under a recording
layer that wraps os.open, open, os.write, os.fsync and os.replace for one session folder and keeps
a model of what the disk holds:

- a file's durable bytes are its bytes at its last fsync (the model takes them, at the fsync, from
  /proc/self/fd/N); a file created since the last sync of its folder is empty;
- a folder's durable entries (name -> inode) are its entries at its last fsync; a rename or a new
  file is not durable before that.

This is the POSIX rule as the Linux fsync(2) manual page states it ("Calling fsync() does not
necessarily ensure that the entry in the directory containing the file has also reached disk. For
that an explicit fsync() on a file descriptor for the directory is also needed."), and the model of
crash-consistency studies such as Pillai et al., "All File Systems Are Not Created Equal", OSDI 2014
(from memory): after a power cut only what was synced is certain.

After every sync the model's disk image is kept; a power cut at any instant leaves one of these
images. Each is written to a fresh folder and opened read-only with Session.open: every decision
whose call had returned before that instant must be there.
"""

from __future__ import annotations

import builtins
import io
import os
import stat
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from reviewer.store.session import Session

JOURNAL = "journal.jsonl"  # file names of the session folder (store/journal.py docstring)
SNAPSHOT = "snapshot.json"
FINGERPRINT = "fp-durability"


def _candidates(n: int) -> pd.DataFrame:
    frames = np.arange(n) * 7 + 3
    return pd.DataFrame({"frame": frames, "frame_end": pd.array([None] * n, dtype="Int64"),
                         "time_s": frames / 400.0, "kind": ["step"] * n,
                         "score": np.full(n, 6.0), "x": np.full(n, 10.0), "y": np.full(n, 12.0)})


class Disk:
    """The write-recording layer and its model of the durable disk contents of one folder."""

    def __init__(self, folder: Path, monkeypatch: pytest.MonkeyPatch) -> None:
        self.folder = folder.resolve()
        self.real = dict(fsync=os.fsync, open=builtins.open, os_open=os.open, write=os.write,
                         replace=os.replace, rename=os.rename)
        self.data: dict[int, bytes] = {}  # inode -> durable bytes
        self.names: dict[str, int] = self._listing()  # durable entries of the folder
        for ino in self.names.values():
            self.data[ino] = self._bytes_of(ino)
        self.log: list[tuple] = []  # ("write"|"fsync"|"dirsync"|"replace", ...) in call order
        self.images: list[dict[str, bytes]] = [self.image()]
        monkeypatch.setattr(os, "fsync", self._fsync)
        monkeypatch.setattr(os, "open", self._os_open)
        monkeypatch.setattr(os, "write", self._write)
        monkeypatch.setattr(os, "replace", self._replace)
        monkeypatch.setattr(os, "rename", self._replace)
        monkeypatch.setattr(builtins, "open", self._open)
        monkeypatch.setattr(io, "open", self._open)  # pathlib opens files through io.open

    # ---- the model ------------------------------------------------------------------------
    def _listing(self) -> dict[str, int]:
        out = {}
        for name in os.listdir(self.folder):
            st = os.lstat(self.folder / name)
            if stat.S_ISREG(st.st_mode):
                out[name] = st.st_ino
        return out

    def _bytes_of(self, ino: int) -> bytes:
        for name, i in self._listing().items():
            if i == ino:
                with self.real["open"](self.folder / name, "rb") as f:
                    return f.read()
        return b""

    def image(self) -> dict[str, bytes]:
        """What a power cut now would leave in the folder."""
        return {name: self.data.get(ino, b"") for name, ino in self.names.items()}

    def _inside(self, path) -> bool:
        try:
            p = Path(os.fsdecode(path))
        except TypeError:
            return False
        return p.is_absolute() and p.parent.resolve() == self.folder or \
            (not p.is_absolute() and (Path.cwd() / p).parent.resolve() == self.folder)

    def _created(self, fd: int) -> None:
        ino = os.fstat(fd).st_ino
        self.data[ino] = b""  # a new file (its inode number may be a reused one): nothing durable
        self.log.append(("create", ino))

    # ---- the wrapped calls ----------------------------------------------------------------
    def _fsync(self, fd: int) -> None:
        self.real["fsync"](fd)
        target = os.readlink(f"/proc/self/fd/{fd}")
        st = os.fstat(fd)
        if stat.S_ISDIR(st.st_mode) and Path(target) == self.folder:
            self.names = self._listing()
            self.log.append(("dirsync",))
        elif stat.S_ISREG(st.st_mode) and Path(target.removesuffix(" (deleted)")).parent == \
                self.folder:
            with self.real["open"](f"/proc/self/fd/{fd}", "rb") as f:
                data = f.read()
            self.data[st.st_ino] = data
            self.log.append(("fsync", st.st_ino, data))
        else:
            return
        self.images.append(self.image())

    def _os_open(self, path, flags, mode=0o777, *, dir_fd=None):
        watch = dir_fd is None and flags & os.O_CREAT and self._inside(path) and \
            not os.path.exists(path)
        fd = self.real["os_open"](path, flags, mode, dir_fd=dir_fd)
        if watch:
            self._created(fd)
        return fd

    def _open(self, file, mode="r", *args, **kwargs):
        watch = isinstance(file, str | bytes | os.PathLike) and any(c in mode for c in "wxa") \
            and self._inside(file) and not os.path.exists(file)
        f = self.real["open"](file, mode, *args, **kwargs)
        if watch:
            self._created(f.fileno())
        return f

    def _write(self, fd: int, data) -> int:
        n = self.real["write"](fd, data)
        st = os.fstat(fd)
        if stat.S_ISREG(st.st_mode):
            self.log.append(("write", st.st_ino))
        return n

    def _replace(self, src, dst, *, src_dir_fd=None, dst_dir_fd=None):
        if self._inside(dst):
            with self.real["open"](src, "rb") as f:
                data = f.read()
            self.log.append(("replace", Path(os.fsdecode(dst)).name, os.lstat(src).st_ino, data))
        return self.real["replace"](src, dst, src_dir_fd=src_dir_fd, dst_dir_fd=dst_dir_fd)


def _state(session: Session) -> dict:
    return {e.event_id: (e.status, e.label, e.frame) for e in session.events}


def _recover(image: dict[str, bytes], where: Path) -> dict:
    where.mkdir()
    for name, data in image.items():
        (where / name).write_bytes(data)
    s = Session.open(where / "m.tif", FINGERPRINT, override=where, readonly=True)
    try:
        return _state(s)
    finally:
        s.close()


def _review(folder: Path, disk: Disk, acked: list[tuple[int, dict]]):
    """A review in two sittings; after each call returns, the state it acknowledged is noted with
    the number of the last disk image at that moment."""
    def ack(s):
        acked.append((len(disk.images) - 1, _state(s)))

    s = Session.open(folder / "m.tif", FINGERPRINT, override=folder,
                     meta={"frames": 10_000, "fps": 400.0})
    s.seed(_candidates(12))
    ack(s)
    calls = [lambda: s.accept("d000001"), lambda: s.reject("d000002"),
             lambda: s.accept("d000003", label="layer"), lambda: s.set_label("d000004", "island"),
             lambda: s.add(500, x=3.0, y=4.0), lambda: s.reject("d000005"), lambda: s.undo(),
             lambda: s.redo(), lambda: s.accept("d000006")]
    for call in calls:
        call()
        ack(s)
    s.close()  # compaction: snapshot written and renamed, journal emptied
    ack(s)
    s = Session.open(folder / "m.tif", FINGERPRINT, override=folder)
    for call in [lambda: s.reject("d000007"), lambda: s.accept("d000008", label="layer"),
                 lambda: s.add(900), lambda: s.undo(), lambda: s.accept("d000009")]:
        call()
        ack(s)
    s.compact()
    ack(s)
    s.reject("d000010")
    ack(s)
    s.close()
    ack(s)


def test_every_acknowledged_decision_survives_a_power_cut_at_any_instant(tmp_path, monkeypatch):
    folder = tmp_path / "session"
    folder.mkdir()
    disk = Disk(folder, monkeypatch)
    acked: list[tuple[int, dict]] = []
    _review(folder, disk, acked)
    monkeypatch.undo()
    states = [state for _, state in acked]
    for k, image in enumerate(disk.images):
        due = [j for j, (c, _) in enumerate(acked) if c <= k]
        recovered = _recover(image, tmp_path / f"cut-{k}")
        if not due:
            continue
        # the last acknowledged state, or a later one whose sync came first
        allowed = states[due[-1]:]
        assert recovered in allowed, (
            f"power cut after disk image {k}: the session reopens with "
            f"{_diff(recovered, states[due[-1]])} although that call had returned")
    assert len(disk.images) > len(acked)  # at least one sync per acknowledged call
    # and the last image is the final state itself
    assert _recover(disk.images[-1], tmp_path / "cut-last") == states[-1]


def _diff(got: dict, want: dict) -> str:
    lost = sorted(k for k in want if got.get(k) != want[k])
    return f"{len(got)} events, {len(lost)} acknowledged ones lost or changed ({lost[:4]})"


def test_each_action_is_fsynced_before_its_call_returns(tmp_path, monkeypatch):
    folder = tmp_path / "session"
    folder.mkdir()
    disk = Disk(folder, monkeypatch)
    s = Session.open(folder / "m.tif", FINGERPRINT, override=folder,
                     meta={"frames": 10_000, "fps": 400.0})
    s.seed(_candidates(5))
    journal = folder / JOURNAL
    for call in [lambda: s.accept("d000001"), lambda: s.reject("d000002"),
                 lambda: s.set_label("d000003", "layer"), lambda: s.add(77), lambda: s.undo(),
                 lambda: s.set_position(40)]:
        start = len(disk.log)
        call()
        with disk.real["open"](journal, "rb") as f:
            on_disk = f.read()
        ino = os.stat(journal).st_ino
        window = disk.log[start:]
        writes = [i for i, e in enumerate(window) if e[0] == "write" and e[1] == ino]
        syncs = [i for i, e in enumerate(window) if e[0] == "fsync" and e[1] == ino]
        assert writes, "the action was not written to the journal"
        # the journal's last sync inside the call came after its last write and holds exactly
        # what the file holds when the call returns
        assert syncs and syncs[-1] > writes[-1], window
        assert window[syncs[-1]][2] == on_disk
    s.close()


def test_each_snapshot_is_fsynced_before_its_rename_and_the_folder_after(tmp_path, monkeypatch):
    folder = tmp_path / "session"
    folder.mkdir()
    disk = Disk(folder, monkeypatch)
    s = Session.open(folder / "m.tif", FINGERPRINT, override=folder,
                     meta={"frames": 10_000, "fps": 400.0})
    s.seed(_candidates(5))  # seeding is made durable by a snapshot
    s.accept("d000001")
    s.compact()
    s.reject("d000002")
    s.close()
    log = disk.log
    renames = [i for i, e in enumerate(log) if e[0] == "replace" and e[1] == SNAPSHOT]
    assert len(renames) >= 3  # seed, compact, close
    for r in renames:
        _, _, ino, data = log[r]
        # the renamed file was synced, with the very bytes it holds, before the rename ...
        synced = [e[2] for e in log[:r] if e[0] == "fsync" and e[1] == ino]
        assert synced and synced[-1] == data, f"snapshot renamed before its bytes were synced ({r})"
        assert data, "empty snapshot"
        # ... and the folder was synced after the rename, before the journal was emptied
        later = log[r + 1:]
        dirsync = next((i for i, e in enumerate(later) if e[0] == "dirsync"), None)
        assert dirsync is not None, "the rename was never made durable (no folder fsync)"
        jino = os.stat(folder / JOURNAL).st_ino
        emptied = next((i for i, e in enumerate(later) if e[0] == "fsync" and e[1] == jino
                        and e[2] == b""), None)
        assert emptied is None or dirsync < emptied, "journal emptied before the rename was durable"


def test_marks_in_a_session_never_seeded_survive_a_power_cut(tmp_path, monkeypatch):
    # events marked by hand before (or without) any scan: the journal is a new file, so its folder
    # entry must be durable too, not only its bytes (fsync(2): "an explicit fsync() on a file
    # descriptor for the directory is also needed"). Known gap, reported to the store's owner;
    folder = tmp_path / "session"
    folder.mkdir()
    disk = Disk(folder, monkeypatch)
    s = Session.open(folder / "m.tif", FINGERPRINT, override=folder,
                     meta={"frames": 10_000, "fps": 400.0})
    acked = []
    for frame in (100, 250, 400):
        s.add(frame)
        acked.append((len(disk.images) - 1, _state(s)))
    monkeypatch.undo()
    last = disk.images[-1]
    assert _recover(last, tmp_path / "cut") == acked[-1][1]
    s.close()


def test_the_screen_changes_only_after_the_journal_is_synced(tmp_path, monkeypatch):
    # the review app, keys pressed through Textual's Pilot: at the moment the journal is synced,
    # the status line must still show the event as it was; right after the key, as decided
    import asyncio

    from reviewer.movie.base import ArrayMovie, Timing
    from reviewer.tui.app import ReviewApp
    from reviewer.tui.keymap import load_keymap
    from reviewer.tui.labels import load_labels

    folder = tmp_path / "session"
    folder.mkdir()
    data = np.random.default_rng(3).integers(900, 1100, size=(200, 24, 32), dtype=np.uint16)
    movie = ArrayMovie(data, tmp_path / "m.npy", timing=Timing(fps=100.0, source="test"),
                       fingerprint=FINGERPRINT)
    s = Session.open(movie.path, FINGERPRINT, override=folder, meta={"frames": 200, "fps": 100.0})
    s.seed(_candidates(5))
    app = ReviewApp(movie, s, keymap=load_keymap(None), labels=load_labels(), advance=False,
                    run_scan=False)
    seen: list[str] = []  # the status line at each journal sync
    real_fsync = os.fsync

    def spy(fd):
        real_fsync(fd)
        if os.readlink(f"/proc/self/fd/{fd}").endswith(JOURNAL):
            seen.append(app.status.plain)

    async def run():
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.press("n")
            await pilot.pause()
            before = app.status.plain
            assert "d000000" in before and "candidate" in before
            monkeypatch.setattr(os, "fsync", spy)
            await pilot.press("a")
            await pilot.pause()
            monkeypatch.setattr(os, "fsync", real_fsync)
            after = app.status.plain
            assert "accepted" in after and "d000000" in after
            assert seen, "no journal fsync while the key was handled"
            assert seen[0] == before, (seen[0], before)
            await pilot.press("q")

    asyncio.run(run())
    s.close()
