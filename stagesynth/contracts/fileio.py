"""Safe output: atomic writes, all-or-nothing sets of files, and a lock per output folder.

An output folder keeps a small manifest (`.stagesynth-manifest.json`) of the
files stagesynth wrote there, their SHA-256 and the SHA-256 of the design file
each was made from. A later run may replace those, unless the user has edited
one since (its hash no longer matches); any other existing file is refused
unless the user passes --force.

Used as a context manager, an `OutputDir` is a transaction: it locks the folder
(a second run into it is told another run is writing there), writes every file
into a temporary sibling folder, and only when the whole set is ready moves it
in, with Ctrl-C held off for those few renames. Interrupted or failed before
that, the folder is left exactly as it was.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import shutil
import signal
import tempfile
import threading
from pathlib import Path

from stagesynth.quantities.errors import OutputExistsError, StageError

MANIFEST = ".stagesynth-manifest.json"
LOCK = ".stagesynth-lock"

# Paths moved into place by committed transactions of this process (what an
# interruption message reports as changed).
COMMITTED: list[Path] = []


def write_bytes_atomic(path: Path, data: bytes) -> None:
    """Write to a temporary file in the same folder, then rename over the target."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    mask = os.umask(0)
    os.umask(mask)
    try:
        os.chmod(tmp, 0o666 & ~mask)  # mkstemp makes 0600; a report is for sharing
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def write_text_atomic(path: Path, text: str) -> None:
    write_bytes_atomic(path, text.encode("utf-8"))


def digest(data: bytes) -> str:
    """SHA-256 of `data`, hex (the manifest's fingerprint of a file)."""
    return hashlib.sha256(data).hexdigest()


_digest = digest


@contextlib.contextmanager
def _sigint_held():
    """Hold Ctrl-C off while a set of files is moved into place; deliver it afterwards."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    pending: list[bool] = []
    previous = signal.signal(signal.SIGINT, lambda *_: pending.append(True))
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)
    if pending:
        raise KeyboardInterrupt


class OutputDir:
    """A folder stagesynth writes into, guarded by its manifest.

    Plain use writes each file at once (atomically). `with OutputDir(...) as out:`
    locks the folder and stages every write until the block ends without error.
    """

    def __init__(self, root: Path, *, force: bool = False) -> None:
        self.root = Path(root)
        self.force = force
        self.source: str | None = None  # digest of the design the next files are made from
        self.spec: str | None = None  # the spec file the last set was judged against
        self._manifest_path = self.root / MANIFEST
        self._owned: dict[str, str] = {}
        self._sources: dict[str, str] = {}
        self._staging: Path | None = None
        self._staged: list[str] = []
        self._removals: list[str] = []
        self._lock_fd: int | None = None
        self._created_root = False
        if self.root.exists() and not self.root.is_dir():
            raise OutputExistsError("exists and is not a folder", file=str(self.root),
                                    accepted="a folder path")
        self._read_manifest()

    # -- manifest -----------------------------------------------------------------
    def _read_manifest(self) -> None:
        self._owned, self._sources, self.spec = {}, {}, None
        if not self._manifest_path.exists():
            return
        try:
            data = json.loads(self._manifest_path.read_text(encoding="utf-8"))
            self._owned = {str(k): str(v) for k, v in dict(data["files"]).items()}
            self._sources = {str(k): str(v) for k, v in dict(data.get("sources", {})).items()}
            self.spec = data.get("spec") if isinstance(data.get("spec"), str) else None
        except (ValueError, KeyError, TypeError, AttributeError, UnicodeDecodeError,
                RecursionError):
            self._owned, self._sources, self.spec = {}, {}, None

    def _manifest_bytes(self) -> bytes:
        data = {"tool": "stagesynth", "files": self._owned, "sources": self._sources}
        if self.spec:
            data["spec"] = self.spec
        body = json.dumps(data, indent=1, sort_keys=True)
        return (body + "\n").encode("utf-8")

    def made_from(self, name: str) -> str | None:
        """Digest of the design file `name` was made from, as the manifest records it."""
        return self._sources.get(name)

    def owned(self) -> dict[str, str]:
        """name -> digest of every file the manifest says stagesynth wrote here."""
        return dict(self._owned)

    def stale(self, design_digest: str) -> list[str]:
        """Files here made from another design than `design_digest` (and still unedited)."""
        out = []
        for name, source in sorted(self._sources.items()):
            target = self.root / name
            if source != design_digest and target.exists() and name in self._owned:
                out.append(name)
        return out

    # -- transaction --------------------------------------------------------------
    def __enter__(self) -> OutputDir:
        self._lock()
        try:
            self._read_manifest()  # as it is now that no other run writes here
            self.root.parent.mkdir(parents=True, exist_ok=True)
            self._staging = Path(tempfile.mkdtemp(prefix=f".{self.root.name}.stagesynth-",
                                                  dir=self.root.parent))
        except BaseException:
            self._unlock()
            raise
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        try:
            if exc_type is None and (self._staged or self._removals):
                self._commit()
        finally:
            if self._staging is not None:
                shutil.rmtree(self._staging, ignore_errors=True)
                self._staging = None
            self._unlock()
            if self._created_root and not any(p.parent == self.root for p in COMMITTED):
                # refused or interrupted in a folder this run made: leave no trace
                (self.root / LOCK).unlink(missing_ok=True)
                with contextlib.suppress(OSError):
                    self.root.rmdir()

    def _lock(self) -> None:
        try:
            import fcntl
        except ImportError:  # pragma: no cover - not POSIX: no lock
            return
        if not self.root.exists():
            self.root.mkdir(parents=True)
            self._created_root = True
        fd = os.open(self.root / LOCK, os.O_RDWR | os.O_CREAT, 0o666)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(fd)
            raise StageError("another stagesynth run is writing into this folder right now",
                             file=str(self.root),
                             accepted="wait until it has finished, or choose another --out"
                             ) from None
        self._lock_fd = fd

    def _unlock(self) -> None:
        if self._lock_fd is not None:
            os.close(self._lock_fd)  # releases the flock
            self._lock_fd = None

    def _commit(self) -> None:
        """Move every staged file into the folder, manifest last; drop stale files of ours."""
        assert self._staging is not None
        self.root.mkdir(parents=True, exist_ok=True)
        (self._staging / MANIFEST).write_bytes(self._manifest_bytes())
        with _sigint_held():
            for name in self._staged:
                os.replace(self._staging / name, self.root / name)
                COMMITTED.append(self.root / name)
            for name in self._removals:
                (self.root / name).unlink(missing_ok=True)
            os.replace(self._staging / MANIFEST, self._manifest_path)

    def drop_stale(self, keep: list[str], candidates: list[str]) -> None:
        """Forget and (at commit) leave out files of ours among `candidates` not in `keep`.

        A run that writes a smaller set than the last one (no histograms this time)
        removes the old files, so no report of another design stays beside the new one.
        """
        for name in candidates:
            if name in keep or name not in self._owned:
                continue
            target = self.root / name
            if target.exists() and self._owned[name] == digest(target.read_bytes()):
                if self._staging is not None:
                    self._removals.append(name)
                else:
                    target.unlink()
                self._owned.pop(name, None)
                self._sources.pop(name, None)

    # -- writing ------------------------------------------------------------------
    def check(self, names: list[str]) -> None:
        """Refuse, before anything is written, if any target is a file we do not own."""
        if self.force:
            return
        foreign = []
        for name in names:
            target = self.root / name
            if not target.exists() or name in self._staged:
                continue
            owned = self._owned.get(name)
            if owned is None or not target.is_file() or owned != digest(target.read_bytes()):
                foreign.append(name)
        if foreign:
            raise OutputExistsError(
                "would overwrite file(s) that stagesynth did not write or that were edited "
                f"since: {', '.join(sorted(foreign))}",
                file=str(self.root),
                accepted="an empty or new folder, or --force to replace them",
            )

    def write_bytes(self, name: str, data: bytes) -> Path:
        self.check([name])
        target = self.root / name
        self._owned[name] = digest(data)
        if self.source is not None:
            self._sources[name] = self.source
        else:
            self._sources.pop(name, None)
        if self._staging is not None:
            (self._staging / name).write_bytes(data)
            if name not in self._staged:
                self._staged.append(name)
            return target
        write_bytes_atomic(target, data)
        COMMITTED.append(target)
        self._save()
        return target

    def write_text(self, name: str, text: str) -> Path:
        return self.write_bytes(name, text.encode("utf-8"))

    def _save(self) -> None:
        write_bytes_atomic(self._manifest_path, self._manifest_bytes())
