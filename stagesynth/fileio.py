"""Safe output: atomic writes, and never overwriting a file stagesynth did not write.

An output folder keeps a small manifest (`.stagesynth-manifest.json`) of the
files stagesynth wrote there and their SHA-256. A later run may replace those,
unless the user has edited one since (its hash no longer matches); any other
existing file is refused unless the user passes --force.
"""

from __future__ import annotations

import hashlib
import json
import os
import tempfile
from pathlib import Path

from .errors import OutputExistsError

MANIFEST = ".stagesynth-manifest.json"


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


def _digest(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


class OutputDir:
    """A folder stagesynth writes into, guarded by its manifest."""

    def __init__(self, root: Path, *, force: bool = False) -> None:
        self.root = Path(root)
        self.force = force
        self._manifest_path = self.root / MANIFEST
        self._owned: dict[str, str] = {}
        if self._manifest_path.exists():
            try:
                self._owned = dict(json.loads(self._manifest_path.read_text())["files"])
            except (ValueError, KeyError, TypeError):
                self._owned = {}
        if self.root.exists() and not self.root.is_dir():
            raise OutputExistsError("exists and is not a folder", file=str(self.root),
                                    accepted="a folder path")

    def check(self, names: list[str]) -> None:
        """Refuse, before anything is written, if any target is a file we do not own."""
        if self.force:
            return
        foreign = []
        for name in names:
            target = self.root / name
            if not target.exists():
                continue
            owned = self._owned.get(name)
            if owned is None or owned != _digest(target.read_bytes()):
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
        write_bytes_atomic(target, data)
        self._owned[name] = _digest(data)
        self._save()
        return target

    def write_text(self, name: str, text: str) -> Path:
        return self.write_bytes(name, text.encode("utf-8"))

    def _save(self) -> None:
        body = json.dumps({"tool": "stagesynth", "files": self._owned}, indent=1, sort_keys=True)
        write_text_atomic(self._manifest_path, body + "\n")
