"""Content-addressed stage store: key recipe, atomic put, verified get, a lock per key, listing, cleaning.

An entry is a folder ``<root>/<kind>/<key>/`` holding ``arrays.npz``, ``meta.json`` and
``manifest.json`` (inputs, versions, timings and the SHA-256 of the two data files).  It is written into a
temporary folder beside its place, every file fsync'ed, then renamed into place, so a reader sees a whole
entry or none.  A read verifies the checksums; a damaged entry is a miss with a reason, and is replaced.
"""

from __future__ import annotations

import fcntl
import hashlib
import io
import json
import os
import shutil
import tempfile
import time
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .. import __version__, errors

SCHEMA = 1
ENV = "THERMOCHAIN_STORE"


def versions() -> dict[str, str]:
    """Versions of the package and of the numerical libraries; part of every key."""
    import meshio
    import pyamg
    import scipy
    import skfem

    return {"thermochain": __version__, "numpy": np.__version__, "scipy": scipy.__version__,
            "scikit-fem": skfem.__version__, "pyamg": pyamg.__version__, "meshio": meshio.__version__}


def canonical(data) -> str:
    """Canonical JSON: sorted keys, no NaN, tuples as lists."""
    return json.dumps(data, sort_keys=True, allow_nan=False, separators=(",", ":"), default=_plain)


def _plain(value):
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (np.floating, np.integer)):
        return value.item()
    raise TypeError(f"not plain data: {type(value).__name__}")


def key(inputs: dict) -> str:
    """SHA-256 of the canonical JSON of what a stage reads (with the store schema)."""
    return hashlib.sha256(canonical({"store_schema": SCHEMA, **inputs}).encode()).hexdigest()


def file_hash(path: Path) -> str:
    h = hashlib.sha256()
    with path.open("rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


@dataclass(frozen=True)
class Entry:
    kind: str
    key: str
    path: Path
    size: int
    created: float
    last_used: float


class Store:
    """The store under ``root``."""

    def __init__(self, root: str | Path):
        self.root = Path(root)

    def _place(self, kind: str, k: str) -> Path:
        return self.root / kind / k

    def holds(self, kind: str, k: str) -> bool:
        """Whether an entry for this key is in the store (without verifying it)."""
        return (self._place(kind, k) / "manifest.json").is_file()

    @contextmanager
    def lock(self, kind: str, k: str):
        """Exclusive lock for one key: a second run waits here, then finds the entry and reuses it."""
        place = self.root / kind
        try:
            place.mkdir(parents=True, exist_ok=True)
            handle = open(place / f".{k}.lock", "a+")
        except OSError as exc:
            raise errors.StoreError(f"store {self.root}: cannot create a lock ({exc.strerror})") from None
        try:
            fcntl.flock(handle, fcntl.LOCK_EX)
            yield
        finally:
            fcntl.flock(handle, fcntl.LOCK_UN)
            handle.close()

    def get(self, kind: str, k: str) -> tuple[dict[str, np.ndarray], dict] | str:
        """(arrays, meta) of a whole, verified entry, or the reason it is a miss."""
        place = self._place(kind, k)
        manifest_path = place / "manifest.json"
        if not manifest_path.is_file():
            return "not in the store"
        try:
            manifest = json.loads(manifest_path.read_text())
            for name, digest in manifest["files"].items():
                if file_hash(place / name) != digest:
                    return f"the stored entry was damaged ({name} fails its checksum) and is recomputed"
            meta = json.loads((place / "meta.json").read_text())
            with np.load(place / "arrays.npz", allow_pickle=False) as data:
                arrays = {n: data[n] for n in data.files}
        except (OSError, ValueError, KeyError) as exc:
            return f"the stored entry could not be read ({type(exc).__name__}) and is recomputed"
        try:
            os.utime(manifest_path)  # last use, for cleaning
        except OSError:
            pass
        return arrays, meta

    def put(self, kind: str, k: str, arrays: dict[str, np.ndarray], meta: dict, manifest: dict) -> Path:
        """Write an entry atomically; a failure is a ``StoreError`` and leaves other entries intact."""
        place = self._place(kind, k)
        tmp = old = None
        try:
            place.parent.mkdir(parents=True, exist_ok=True)
            tmp = Path(tempfile.mkdtemp(prefix=f".{k[:12]}.", dir=place.parent))
            buffer = io.BytesIO()
            np.savez(buffer, **arrays)
            files = {"arrays.npz": buffer.getvalue(), "meta.json": canonical(meta).encode()}
            digests = {}
            for name, content in files.items():
                _write_synced(tmp / name, content)
                digests[name] = hashlib.sha256(content).hexdigest()
            full = manifest | {"kind": kind, "key": k, "files": digests, "written": time.time()}
            _write_synced(tmp / "manifest.json", json.dumps(full, indent=1, sort_keys=True, default=_plain).encode())
            _fsync_dir(tmp)
            if place.exists():  # a damaged entry being replaced: move it aside whole, never delete it in place,
                old = Path(tempfile.mkdtemp(prefix=f".{k[:12]}.", dir=place.parent))  # so a kill cannot leave
                os.rename(place, old / "entry")  # half an entry behind; the place is empty for a moment (a miss)
            os.rename(tmp, place)
            tmp = None
            _fsync_dir(place.parent)
            if old is not None:
                shutil.rmtree(old, ignore_errors=True)
        except OSError as exc:
            if old is not None and not place.exists():  # put the entry that was moved aside back
                try:
                    os.rename(old / "entry", place)
                except OSError:
                    pass
            raise errors.StoreError(f"store {self.root}: cannot write the {kind} entry ({exc.strerror or exc}); "
                                    "earlier entries are intact") from None
        finally:
            if tmp is not None:
                shutil.rmtree(tmp, ignore_errors=True)
        return place

    def entries(self) -> list[Entry]:
        out = []
        if not self.root.is_dir():
            return out
        for manifest in sorted(self.root.glob("*/*/manifest.json")):
            place = manifest.parent
            if place.name.startswith("."):
                continue  # a write that was interrupted, not an entry
            size = sum(f.stat().st_size for f in place.iterdir() if f.is_file())
            data = json.loads(manifest.read_text())
            out.append(Entry(place.parent.name, place.name, place, size, data.get("written", 0.0),
                             manifest.stat().st_mtime))
        return out

    def clean(self, older_than_days: float) -> list[Entry]:
        """Remove entries not used for ``older_than_days``; also leftovers of interrupted writes."""
        limit = time.time() - older_than_days * 86400
        removed = [e for e in self.entries() if e.last_used < limit]
        for e in removed:
            shutil.rmtree(e.path, ignore_errors=True)
        for leftover in self.root.glob("*/.*.*") if self.root.is_dir() else []:
            if leftover.is_dir():
                shutil.rmtree(leftover, ignore_errors=True)
        return removed


def _write_synced(path: Path, content: bytes) -> None:
    with open(path, "wb") as f:
        f.write(content)
        f.flush()
        os.fsync(f.fileno())


def _fsync_dir(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)
