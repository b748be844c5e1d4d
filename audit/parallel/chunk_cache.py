"""Finished chunks on disk, so that an interrupted or repeated sweep computes only what is missing.

A cache folder is named by a hash of everything that decides a chunk's content: the scenario's
fingerprint (its TOML, its data, its model file and the modules the model imports from its
folder), the sweep's settings, the format below and the source of the package's computing
modules (``code_digest``), so that a changed model or engine never reuses chunks an older one
wrote. Each chunk is one ``.npz`` file of plain arrays (no pickles),
written to a temporary file in the same folder and moved into place with ``os.replace``, which
is atomic on one file system: a crash leaves either the whole chunk or none of it (and perhaps
the temporary file of a writer killed outright, which the next write to the folder removes). Every chunk
carries a SHA-256 of its arrays (names, types, shapes and bytes); a file that cannot be read back
or whose arrays no longer match their checksum (a disk full during an earlier write, a flipped
bit, a stray file or folder in its place) is treated as missing and recomputed, never trusted.
"""
from __future__ import annotations

import functools
import hashlib
import json
import os
import re
import shutil
import tempfile
from pathlib import Path

import numpy as np

#: The folder under a command's output folder that holds every stage's caches.
CACHE_FOLDER = "cache"
#: Raise when the layout of a chunk file changes: old caches are then ignored (changes to the
#: computation are caught by ``code_digest``).
CACHE_FORMAT = 5
#: Folders of the package that only present results; their code never changes a chunk.
PRESENTATION = ("cli", "figures", "report")
#: Hex digits of the settings hash in the folder name.
KEY_LENGTH = 20
#: The array in each chunk file that holds the SHA-256 of the others.
CHECKSUM = "checksum"
#: Suffix of a chunk file being written, and the name pattern that holds its writer's process id.
PARTIAL = ".partial"
WRITER = re.compile(r"^\..+-(\d+)-[^-]*\.partial$")


def cache_root(out: Path) -> Path:
    """The folder under the output folder ``out`` that holds every stage's caches."""
    return Path(out) / CACHE_FOLDER


@functools.cache
def code_digest() -> str:
    """Hash of the source of every module that computes or merges chunks: the package's own
    modules outside the presentation folders, each named by its path inside the package."""
    package = Path(__file__).resolve().parents[1]
    digest = hashlib.sha256()
    for path in sorted(package.rglob("*.py")):
        inside = path.relative_to(package)
        if inside.parts[0] not in PRESENTATION:
            digest.update(inside.as_posix().encode() + b"\0" + path.read_bytes())
    return digest.hexdigest()


def cache_key(settings: dict) -> str:
    """A short hash of JSON-able ``settings`` (keys sorted, floats written exactly)."""
    text = json.dumps({"format": CACHE_FORMAT, **settings}, sort_keys=True, default=_exact)
    return hashlib.sha256(text.encode()).hexdigest()[:KEY_LENGTH]


def _exact(value):
    if isinstance(value, np.ndarray):
        return [float(item).hex() for item in value.ravel()] + [list(value.shape)]
    if isinstance(value, (np.floating, float)):
        return float(value).hex()
    if isinstance(value, np.integer):
        return int(value)
    raise TypeError(f"cannot hash {type(value).__name__}")


class ChunkStore:
    """The chunk files of one sweep stage in ``folder`` (created on first write).

    Files are named ``<stage>-<index>.npz``; ``stage`` tells design chunks from map chunks.
    """

    def __init__(self, folder: Path, stage: str) -> None:
        self.folder = Path(folder)
        self.stage = stage
        self._leftovers_removed = False

    def path(self, index: int) -> Path:
        return self.folder / f"{self.stage}-{index:06d}.npz"

    def load(self, index: int) -> dict[str, np.ndarray] | None:
        """The arrays of chunk ``index``, or None when the chunk is not (readably) stored."""
        path = self.path(index)
        if not path.is_file():
            return None
        try:
            with np.load(path, allow_pickle=False) as stored:
                arrays = {name: stored[name] for name in stored.files}
        except Exception:
            # A damaged zip or deflate stream raises whatever its parser meets first (BadZipFile,
            # zlib.error, ValueError, NotImplementedError, ...): all mean "not stored".
            return None
        stored_checksum = arrays.pop(CHECKSUM, None)
        if stored_checksum is None or stored_checksum.tobytes() != _checksum(arrays).tobytes():
            return None
        return arrays

    def has(self, index: int) -> bool:
        """True when chunk ``index`` is stored and readable."""
        return self.load(index) is not None

    def save(self, index: int, arrays: dict[str, np.ndarray]) -> Path:
        """Write chunk ``index`` atomically and return its path."""
        self.folder.mkdir(parents=True, exist_ok=True)
        if self.path(index).is_dir():
            # Something made a folder where the chunk belongs; it is ours to replace.
            shutil.rmtree(self.path(index))
        if not self._leftovers_removed:
            remove_dead_writers_files(self.folder)
            self._leftovers_removed = True
        handle, temporary = tempfile.mkstemp(dir=self.folder, prefix=f".{self.stage}-{os.getpid()}-",
                                             suffix=PARTIAL)
        try:
            with os.fdopen(handle, "wb") as stream:
                np.savez_compressed(stream, **arrays, **{CHECKSUM: _checksum(arrays)})
                stream.flush()
                os.fsync(stream.fileno())
            os.replace(temporary, self.path(index))
        except BaseException:
            Path(temporary).unlink(missing_ok=True)
            raise
        return self.path(index)


def remove_dead_writers_files(folder: Path) -> None:
    """Remove the half-written chunk files of writers that no longer run (killed with SIGKILL).

    Each temporary file carries its writer's process id; a file whose writer is alive (another
    run, this one) is left alone. Skipped where ``os.kill(pid, 0)`` does not merely ask
    (Windows, where it would end the process).
    """
    if os.name != "posix":
        return
    for path in folder.glob(f".*{PARTIAL}"):
        match = WRITER.match(path.name)
        if match and not _running(int(match.group(1))):
            path.unlink(missing_ok=True)


def _running(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True            # another user's process
    return True


def _checksum(arrays: dict[str, np.ndarray]) -> np.ndarray:
    """(32,) uint8: SHA-256 over every array's name, type, shape and bytes, in name order."""
    digest = hashlib.sha256()
    for name in sorted(arrays):
        array = np.ascontiguousarray(arrays[name])
        digest.update(f"{name}\0{array.dtype.str}\0{array.shape}\0".encode())
        digest.update(array.tobytes())
    return np.frombuffer(digest.digest(), dtype=np.uint8)
