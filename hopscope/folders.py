"""Where the commands write: output files checked before slow work, and output folders a run owns.

An output folder of ``hopscope run`` (and ``demo``) holds a lock file while a run writes into it
(:data:`LOCK_NAME`, with the run's process id) and, afterwards, a manifest of the files that run wrote
(:data:`MANIFEST_NAME`). The next run into the folder first removes the files the manifest lists (stale
figures or per-clip tracks of an earlier run), never a file it was given as input, never anything outside
the folder and never a file no run wrote; a second run while the lock is held is refused with one line.
"""

from __future__ import annotations

import contextlib
import json
import os
import socket
from collections.abc import Iterable, Iterator
from pathlib import Path

from hopscope.shared.fileio import write_text_atomic

#: Lock file of a run in progress (process id and host inside).
LOCK_NAME = ".hopscope-run.lock"
#: Manifest of the files the folder's last run wrote (JSON: schema, files relative to the folder).
MANIFEST_NAME = ".hopscope-run.json"
MANIFEST_SCHEMA = "hopscope.run-files/1"


def check_output_file(path: str | os.PathLike[str], option: str = "-o") -> Path:
    """Check that ``path`` can be written as a file before slow work starts.

    Raises
    ------
    ValueError
        ``path`` is a folder, its folder does not exist, or the folder is not writable (one line naming
        the option and the path).
    """
    p = Path(path)
    parent = p.parent if str(p.parent) else Path(".")
    if p.is_dir():
        raise ValueError(f"{option} {p}: is a folder; give the name of the file to write")
    if not parent.is_dir():
        raise ValueError(f"{option} {p}: output folder {parent} does not exist")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise ValueError(f"{option} {p}: cannot write into {parent} (permission denied)")
    return p


class RunFolder:
    """An output folder held by one run: records what it writes (see the module docstring).

    Attributes
    ----------
    path : the folder.
    removed : files of the folder's earlier run removed when this run took the folder.
    """

    def __init__(self, path: Path) -> None:
        self.path = path
        self.removed: tuple[Path, ...] = ()
        self._owned: list[Path] = []

    def own(self, *paths: Path | None) -> None:
        """Record files this run wrote into the folder (listed in the manifest for the next run)."""
        for p in paths:
            if p is not None and p not in self._owned:
                self._owned.append(p)

    @property
    def owned(self) -> tuple[Path, ...]:
        return tuple(self._owned)

    def _manifest(self) -> Path:
        return self.path / MANIFEST_NAME

    def clear_previous(self, keep: Iterable[Path]) -> None:
        """Remove the files the folder's earlier run listed, except ``keep`` (this run's inputs)."""
        try:
            doc = json.loads(self._manifest().read_text(encoding="utf-8"))
            names = [str(n) for n in doc["files"]] if doc.get("schema") == MANIFEST_SCHEMA else []
        except (OSError, ValueError, KeyError, TypeError):
            names = []  # no manifest (a fresh folder) or not one of ours: remove nothing
        kept = {Path(k).resolve() for k in keep}
        base = self.path.resolve()
        removed = []
        for name in names:
            p = (self.path / name).resolve()
            if p.parent != base or p in kept or not p.is_file():
                continue  # only plain files directly in the folder, and never an input
            p.unlink()
            removed.append(self.path / name)
        self.removed = tuple(removed)

    def write_manifest(self) -> None:
        files = sorted({p.name for p in self._owned if p.exists()})
        doc = {"schema": MANIFEST_SCHEMA, "files": files}
        write_text_atomic(self._manifest(), json.dumps(doc, indent=1) + "\n")


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # someone else's process
        return True
    return True


def _take_lock(lock: Path, out: Path, on_warning) -> None:
    for _ in range(2):
        try:
            fd = os.open(lock, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
        except FileExistsError:
            try:
                pid_text, host = lock.read_text(encoding="utf-8").split()[:2]
                pid = int(pid_text)
            except (OSError, ValueError):
                pid, host = -1, ""
            if host == socket.gethostname() and pid > 0 and not _pid_alive(pid):
                on_warning(
                    f"--out {out}: removed the lock of a run that ended without clearing it (pid {pid})"
                )
                lock.unlink(missing_ok=True)
                continue
            raise ValueError(
                f"--out {out}: another hopscope run is writing into this folder (lock file {lock}"
                + (f", pid {pid}" if pid > 0 else "")
                + "); wait for it, or delete the lock file if no run is active"
            ) from None
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(f"{os.getpid()} {socket.gethostname()}\n")
        return
    raise ValueError(f"--out {out}: could not take the lock file {lock}")  # pragma: no cover - a race


@contextlib.contextmanager
def run_folder(
    out: str | os.PathLike[str], *, keep: Iterable[Path] = (), on_warning=None
) -> Iterator[RunFolder]:
    """Hold an output folder for one run: create it, take its lock, remove the earlier run's files.

    On leaving (success or not) the manifest lists what this run wrote, the lock is released, and a
    folder the run created is removed again when nothing was written into it.

    Raises
    ------
    ValueError
        ``out`` is a file, or another run holds the folder's lock.
    """
    path = Path(out)
    if path.exists() and not path.is_dir():
        raise ValueError(f"--out {path}: exists and is not a folder")
    created = not path.exists()
    path.mkdir(parents=True, exist_ok=True)
    lock = path / LOCK_NAME
    try:
        _take_lock(lock, path, on_warning or (lambda _m: None))
    except BaseException:
        if created:
            with contextlib.suppress(OSError):
                path.rmdir()
        raise
    folder = RunFolder(path)
    try:
        folder.clear_previous(keep)
        yield folder
    finally:
        try:
            if folder.owned or folder.removed:
                folder.write_manifest()
        finally:
            lock.unlink(missing_ok=True)
            if created and not any(path.iterdir()):
                path.rmdir()
