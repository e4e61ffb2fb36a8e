"""Content-addressed stage store: key recipe, atomic put, verified and authenticated get, a lock per key,
listing, cleaning.

A store is a folder that says so: ``thermochain-store.json`` at its root holds the store's schema version.
An entry is a folder ``<root>/<kind>/<key>/`` holding ``arrays.npz``, ``meta.json`` and ``manifest.json``
(inputs, versions, timings, the SHA-256 of the two data files and an HMAC of all that under the user's
store key).  It is written into a temporary folder ``.<key>.<random>`` beside its place, every file
fsync'ed, then renamed into place, so a reader sees a whole entry or none.  A read never follows a link
inside the store, verifies the checksums and the HMAC; a damaged, foreign or forged entry is a miss with a
reason, and is replaced.  Cleaning deletes only what it verified to be an entry (or a leftover of an
interrupted write), under that entry's lock, and reports exactly that.  Trust model: docs/reliability.md.
"""

from __future__ import annotations

import hashlib
import hmac
import io
import json
import os
import re
import secrets
import stat
import tempfile
import threading
import time
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .. import __version__, errors, files

SCHEMA = 2
ENV = "THERMOCHAIN_STORE"
#: a file holding the key that signs this user's (or team's) entries; default: the user's configuration folder
KEY_ENV = "THERMOCHAIN_STORE_KEY"
MARKER = "thermochain-store.json"
ENTRY_FILES = ("arrays.npz", "meta.json", "manifest.json")
_KEY = re.compile(r"^[0-9a-f]{64}$")
_KIND = re.compile(r"^[a-z][a-z0-9_]*$")
_LEFTOVER = re.compile(r"^\.([0-9a-f]{64})\.[a-z0-9_]{8}$")  # tempfile.mkdtemp(prefix=".KEY."); locks are .KEY.lock
_NOFOLLOW = getattr(os, "O_NOFOLLOW", 0)


def root(option: str | Path | None = None) -> Path:
    """The store folder every command uses: ``--store``, else ``$THERMOCHAIN_STORE``, else ``store`` in
    the user's cache folder (``~/.cache/thermochain/store`` on Linux) -- one place whatever the current
    folder or the workflow's folder."""
    if option:
        return Path(option)
    if os.environ.get(ENV):
        return Path(os.environ[ENV])
    import platformdirs

    return platformdirs.user_cache_path("thermochain") / "store"


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


# ---------------------------------------------------------------------------------------- the store key

_KEYS: dict[str, bytes] = {}
_KEYS_LOCK = threading.Lock()


def key_file() -> Path:
    """``$THERMOCHAIN_STORE_KEY``, else ``store.key`` in the user's configuration folder."""
    if os.environ.get(KEY_ENV):
        return Path(os.environ[KEY_ENV])
    import platformdirs

    return platformdirs.user_config_path("thermochain") / "store.key"


def signing_key() -> bytes:
    """The secret that authenticates entries: read from ``key_file()``, created (owner-only) on first use.
    A key that every user can read or write is refused: it would authenticate anyone's entries."""
    path = key_file()
    with _KEYS_LOCK:
        if str(path) in _KEYS:
            return _KEYS[str(path)]
        try:
            if not path.exists():
                _create_key(path)
            info = path.stat()
            if os.name != "nt" and info.st_mode & (stat.S_IROTH | stat.S_IWOTH):
                raise errors.InputError(f"{path}: the store key can be read or written by every user (mode "
                                        f"{stat.S_IMODE(info.st_mode):04o}); it must be private to you or your "
                                        f"group: chmod o-rw {path} (docs/reliability.md, sharing a store)")
            secret = path.read_text(encoding="ascii").strip()
            if not re.fullmatch(r"[0-9a-f]{64}", secret):
                raise errors.InputError(f"{path}: not a thermochain store key (64 hexadecimal digits); remove it to "
                                        "have a new one made (entries signed with the old key become misses)")
        except (OSError, UnicodeDecodeError) as exc:
            raise errors.StoreError(f"{path}: cannot read or create the store key "
                                    f"({getattr(exc, 'strerror', None) or exc})") from None
        _KEYS[str(path)] = bytes.fromhex(secret)
        return _KEYS[str(path)]


def _create_key(path: Path) -> None:
    """Write a new random key owner-only; a concurrent creator wins without either reading half a key."""
    path.parent.mkdir(parents=True, exist_ok=True, mode=0o700)
    tmp = path.with_name(f".{path.name}.{secrets.token_hex(8)}")
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | _NOFOLLOW, 0o600)
    try:
        os.write(fd, (secrets.token_hex(32) + "\n").encode())
        os.fsync(fd)
    finally:
        os.close(fd)
    try:
        os.link(tmp, path)  # fails if another process made the key meanwhile: theirs is kept
    except FileExistsError:
        pass
    finally:
        os.unlink(tmp)


def _mac(manifest: dict) -> str:
    return hmac.new(signing_key(), canonical(manifest).encode(), hashlib.sha256).hexdigest()


# ---------------------------------------------------------------------------------------------- entries

@dataclass(frozen=True)
class Entry:
    kind: str
    key: str
    path: Path
    size: int
    created: float
    last_used: float
    problem: str = ""  # why the entry cannot be read ("" for a readable manifest)


@dataclass
class Cleaned:
    """What ``Store.clean`` did: entries removed, leftovers of interrupted writes removed, and what it left
    alone with the reason (in use, not an entry, a link)."""

    removed: list[Entry] = field(default_factory=list)
    leftovers: list[Path] = field(default_factory=list)
    kept: list[tuple[Path, str]] = field(default_factory=list)

    def __len__(self) -> int:
        return len(self.removed)


def _lstat(path: Path):
    try:
        return os.lstat(path)
    except OSError:
        return None


def _is_dir(path: Path) -> bool:
    """A real folder, not a link to one."""
    info = _lstat(path)
    return info is not None and stat.S_ISDIR(info.st_mode)


def _read(path: Path) -> bytes:
    """The bytes of a regular file, never through a link."""
    fd = os.open(path, os.O_RDONLY | _NOFOLLOW | getattr(os, "O_BINARY", 0))
    try:
        if not stat.S_ISREG(os.fstat(fd).st_mode):
            raise OSError(f"{path.name} is not a regular file")
        with os.fdopen(fd, "rb", closefd=False) as f:
            return f.read()
    finally:
        os.close(fd)


class Store:
    """The store under ``root``."""

    def __init__(self, root: str | Path):
        self.root = Path(root)

    def _place(self, kind: str, k: str) -> Path:
        return self.root / kind / k

    # ------------------------------------------------------------------------------ identity and trust

    def is_store(self) -> bool:
        """Whether ``root`` carries the store marker (a regular file, not a link)."""
        info = _lstat(self.root / MARKER)
        return info is not None and stat.S_ISREG(info.st_mode)

    def _marker_schema(self):
        try:
            return json.loads(_read(self.root / MARKER)).get("store_schema")
        except (OSError, ValueError, AttributeError):
            return None

    def _require(self, doing: str) -> None:
        """Refuse a folder that is not a store (or one written by a newer thermochain)."""
        if not self.is_store():
            raise errors.InputError(
                f"{self.root}: not a thermochain store (no {MARKER} at its root), so nothing is {doing}; give "
                "the store folder (--store, $THERMOCHAIN_STORE; `thermochain store` shows the default)")
        schema = self._marker_schema()
        if not isinstance(schema, int) or schema > SCHEMA:
            raise errors.InputError(f"{self.root / MARKER}: store schema {schema!r} is not one this thermochain "
                                    f"(store schema {SCHEMA}) knows, so nothing is {doing}")

    def check(self) -> None:
        """Refuse, before anything is solved, a store folder a run could not use: one that is not a store but
        holds other things, one every user can write, one written by a newer thermochain (``InputError``)."""
        if not self.root.exists():
            return
        if not self.root.is_dir():
            raise errors.InputError(f"{self.root}: the store must be a folder; this is a file")
        if not self.is_store():
            try:
                others = sorted(p.name for p in self.root.iterdir() if not p.name.startswith(f".{MARKER}."))  # a marker
                # being written by a concurrent first run
            except OSError as exc:
                raise errors.StoreError(f"store {self.root}: cannot read it ({exc.strerror or exc})") from None
            if others:
                raise errors.InputError(
                    f"{self.root}: not a thermochain store (no {MARKER}) and not empty (it holds "
                    f"{', '.join(others[:5])}{', ...' if len(others) > 5 else ''}); give a new or empty "
                    "folder, or the store's own folder")
            return
        self._require("written")
        if os.name != "nt":
            info = self.root.stat()
            if info.st_mode & stat.S_IWOTH:
                raise errors.InputError(
                    f"{self.root}: every user can write this store (mode {stat.S_IMODE(info.st_mode):04o}), so "
                    f"anyone could delete or replace its entries; chmod o-w {self.root} (to share a store, "
                    "use a group: docs/reliability.md)")

    def _open_for_writing(self) -> None:
        """Make ``root`` a store if it is new or empty (see ``check`` for what is refused)."""
        self.check()
        if not self.root.exists():
            try:
                self.root.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                raise errors.StoreError(f"store {self.root}: cannot create it ({exc.strerror or exc})") from None
        if not self.is_store():
            try:
                files.write_text(self.root / MARKER, json.dumps({"store_schema": SCHEMA, "thermochain": __version__,
                                                                 "created": time.time()}, indent=1) + "\n")
            except OSError as exc:
                raise errors.StoreError(f"store {self.root}: cannot mark it as a store ({exc.strerror or exc})") from None

    # ------------------------------------------------------------------------------------------ locking

    def _lock(self, kind: str, k: str):
        import filelock

        return filelock.FileLock(self.root / kind / f".{k}.lock", is_singleton=True)

    def holds(self, kind: str, k: str) -> bool:
        """Whether an entry for this key is in the store (without verifying it)."""
        info = _lstat(self._place(kind, k) / "manifest.json")
        return _is_dir(self._place(kind, k)) and info is not None and stat.S_ISREG(info.st_mode)

    @contextmanager
    def lock(self, kind: str, k: str):
        """Exclusive lock for one key: a second run waits here, then finds the entry and reuses it.
        (Reentrant within a thread; threads and processes exclude each other.)"""
        if not _KIND.match(kind) or not _KEY.match(k):
            raise errors.StoreError(f"store {self.root}: '{kind}/{k}' is not a stage kind and key")
        self._open_for_writing()
        place = self.root / kind
        try:
            if not _is_dir(place):
                place.mkdir(exist_ok=True)
                if not _is_dir(place):
                    raise OSError(f"{place} is a link or a file, not a folder")
            lock = self._lock(kind, k)
            lock.acquire()
        except OSError as exc:
            raise errors.StoreError(f"store {self.root}: cannot create a lock ({exc.strerror or exc})") from None
        try:
            yield
        finally:
            lock.release()

    # --------------------------------------------------------------------------------------- get / put

    def get(self, kind: str, k: str) -> tuple[dict[str, np.ndarray], dict] | str:
        """(arrays, meta) of a whole, verified entry signed with this user's key, or the reason it is a miss."""
        place = self._place(kind, k)
        if not _is_dir(self.root / kind) or not _is_dir(place) or _lstat(place / "manifest.json") is None:
            return "not in the store"
        try:
            manifest = json.loads(_read(place / "manifest.json"))
            mac = manifest.pop("mac", None) if isinstance(manifest, dict) else None
            content = {name: _read(place / name) for name in ("arrays.npz", "meta.json")}
            for name, data in content.items():
                if hashlib.sha256(data).hexdigest() != manifest["files"][name]:
                    return f"the stored entry was damaged ({name} fails its checksum) and is recomputed"
            if not (isinstance(mac, str) and hmac.compare_digest(mac, _mac(manifest))) \
                    or manifest.get("kind") != kind or manifest.get("key") != k:
                return ("the stored entry is not signed with your store key (written by someone else, or "
                        "altered) and is recomputed")
            meta = json.loads(content["meta.json"])
            with np.load(io.BytesIO(content["arrays.npz"]), allow_pickle=False) as data:
                arrays = {n: data[n] for n in data.files}
        except (OSError, ValueError, KeyError, TypeError) as exc:
            return f"the stored entry could not be read ({type(exc).__name__}) and is recomputed"
        try:
            os.utime(place / "manifest.json", follow_symlinks=False)  # last use, for cleaning
        except (OSError, NotImplementedError):
            pass
        return arrays, meta

    def put(self, kind: str, k: str, arrays: dict[str, np.ndarray], meta: dict, manifest: dict) -> Path:
        """Write an entry atomically (call it inside ``lock(kind, k)``); a failure is a ``StoreError`` and
        leaves other entries intact."""
        place = self._place(kind, k)
        tmp = old = None
        with self.lock(kind, k):  # reentrant: the caller holds it already; cleaning sees the write as live
            try:
                tmp = Path(tempfile.mkdtemp(prefix=f".{k}.", dir=place.parent))
                os.chmod(tmp, files.folder_mode())  # mkdtemp makes it owner-only; an entry follows the umask
                buffer = io.BytesIO()
                np.savez(buffer, **arrays)
                content = {"arrays.npz": buffer.getvalue(), "meta.json": canonical(meta).encode()}
                digests = {}
                for name, data in content.items():
                    _write_synced(tmp / name, data)
                    digests[name] = hashlib.sha256(data).hexdigest()
                full = json.loads(canonical(manifest | {"kind": kind, "key": k, "files": digests,
                                                        "written": time.time()}))
                full["mac"] = _mac(full)
                _write_synced(tmp / "manifest.json", json.dumps(full, indent=1, sort_keys=True).encode())
                files.fsync_folder(tmp)
                if _lstat(place) is not None:  # a damaged entry being replaced: moved aside whole, never deleted
                    old = Path(tempfile.mkdtemp(prefix=f".{k}.", dir=place.parent))  # in place, so a kill cannot
                    os.rename(place, old / "entry")  # leave half an entry; the place is empty for a moment (a miss)
                os.rename(tmp, place)
                tmp = None
                files.fsync_folder(place.parent)
                if old is not None and not _remove_entry_folder(old):  # the replaced entry; a failure here
                    old = None                                          # leaves a leftover for cleaning
            except OSError as exc:
                if old is not None and _lstat(place) is None:  # put the entry that was moved aside back
                    try:
                        os.rename(old / "entry", place)
                    except OSError:
                        pass
                raise errors.StoreError(f"store {self.root}: cannot write the {kind} entry ({exc.strerror or exc}); "
                                        "earlier entries are intact") from None
            finally:
                if tmp is not None:
                    _remove_entry_folder(tmp)
        return place

    # ------------------------------------------------------------------------------- listing, cleaning

    def _kinds(self, kept: list | None = None) -> list[Path]:
        out = []
        if not self.root.is_dir():
            return out
        for p in sorted(self.root.iterdir()):
            if p.name == MARKER or p.name.startswith("."):
                continue
            if not _is_dir(p) or not _KIND.match(p.name):
                if kept is not None:
                    kept.append((p, "a link, not a folder of the store" if _lstat(p) and stat.S_ISLNK(
                        _lstat(p).st_mode) else "not a stage-kind folder of the store"))
                continue
            out.append(p)
        return out

    def entries(self, kept: list | None = None) -> list[Entry]:
        """Every entry (a ``<kind>/<key>`` folder); an entry whose manifest cannot be read carries a problem."""
        out = []
        for folder in self._kinds(kept):
            for place in sorted(folder.iterdir()):
                if place.name.startswith("."):
                    continue  # locks and writes in progress or interrupted
                if not _KEY.match(place.name) or not _is_dir(place):
                    if kept is not None:
                        kept.append((place, "not an entry (a store entry is a real folder named by its key)"))
                    continue
                info = [_lstat(place / n) for n in ENTRY_FILES]
                size = sum(i.st_size for i in info if i is not None and stat.S_ISREG(i.st_mode))
                last = info[2].st_mtime if info[2] is not None else _lstat(place).st_mtime
                try:
                    data = json.loads(_read(place / "manifest.json"))
                    created, problem = float(data.get("written", 0.0)), ""
                except (OSError, ValueError, TypeError, AttributeError) as exc:
                    created, problem = 0.0, f"its manifest cannot be read ({type(exc).__name__})"
                out.append(Entry(folder.name, place.name, place, size, created, last, problem))
        return out

    def clean(self, older_than_days: float) -> Cleaned:
        """Remove entries not used for ``older_than_days`` and leftovers of interrupted writes.

        Only a verified store is cleaned; nothing is followed through a link; an entry or leftover is
        removed under its key's lock (one in use, or a write in progress, is kept) and only when it holds
        nothing but an entry's files."""
        self._require("removed")
        limit = time.time() - older_than_days * 86400
        done = Cleaned()
        for e in self.entries(done.kept):
            if e.last_used >= limit:
                continue
            reason = self._locked_removal(e.kind, e.key, e.path, limit)
            if reason:
                done.kept.append((e.path, reason))
            else:
                done.removed.append(e)
        for folder in self._kinds():
            for p in sorted(folder.iterdir()):
                match = _LEFTOVER.match(p.name)
                if not match:
                    continue
                if not _is_dir(p):
                    done.kept.append((p, "not a folder"))
                    continue
                reason = self._locked_removal(folder.name, match.group(1), p, None)
                if reason:
                    done.kept.append((p, reason))
                else:
                    done.leftovers.append(p)
        return done

    def _locked_removal(self, kind: str, k: str, path: Path, limit: float | None) -> str:
        """Remove one entry or leftover under its key's lock; '' when removed, else why it was kept."""
        import filelock

        lock = self._lock(kind, k)
        try:
            lock.acquire(timeout=0)
        except filelock.Timeout:
            return "in use by a run (its lock is held)"
        except OSError as exc:
            return f"its lock cannot be taken ({exc.strerror or exc})"
        try:
            if limit is not None:
                info = _lstat(path / "manifest.json")
                if info is not None and info.st_mtime >= limit:
                    return "used meanwhile"
            return _remove_entry_folder(path)
        finally:
            lock.release()


def _remove_entry_folder(path: Path) -> str:
    """Delete an entry folder, or a leftover (an entry folder, or one holding the entry moved aside as
    ``entry``), file by file and only if it holds nothing but an entry's regular files; '' when removed (or
    already gone), else why it was kept."""
    if _lstat(path) is None:
        return ""
    if not _is_dir(path):
        return "not a folder"
    names = os.listdir(path)
    folders = [path / "entry", path] if "entry" in names else [path]
    if len(folders) == 2 and (len(names) > 1 or not _is_dir(path / "entry")):
        return "holds files that are not a store entry's"
    contents = {folder: os.listdir(folder) for folder in folders[:1]}
    for name in contents[folders[0]]:
        info = _lstat(folders[0] / name)
        if name not in ENTRY_FILES or info is None or not stat.S_ISREG(info.st_mode):
            return "holds files that are not a store entry's"
    for name in contents[folders[0]]:
        os.unlink(folders[0] / name)
    for folder in folders:
        os.rmdir(folder)
    return ""


def _write_synced(path: Path, content: bytes) -> None:
    """Create ``path`` (never through a link) with the user's file mode and write it durably."""
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL | _NOFOLLOW | getattr(os, "O_BINARY", 0),
                 files.file_mode())
    with os.fdopen(fd, "wb") as f:
        f.write(content)
        f.flush()
        os.fsync(f.fileno())
