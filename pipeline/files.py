"""The one way thermochain writes a file: whole or not at all, never through a link, with the user's mode
(and ``read_toml``, the one way it reads a TOML input file: bounded, every failure an ``InputError``).

A file is written into a fresh temporary file with an unpredictable name in the target's own folder,
created exclusively (``O_CREAT | O_EXCL``, and ``O_NOFOLLOW`` where the system has it) so that a link
planted under any name cannot redirect the write; its bytes are fsync'ed, its mode set from the user's
umask (as any program's new file), and it is renamed over the target with ``os.replace`` (which replaces a
link at the target's name instead of writing through it), then the folder is fsync'ed so the rename
survives a power cut.  A reader sees the old file or the new one, never a mix.
"""

from __future__ import annotations

import errno
import os
import re
import secrets
import stat
import threading
import tomllib
from contextlib import contextmanager
from pathlib import Path

_NOFOLLOW = getattr(os, "O_NOFOLLOW", 0)
_FLAGS = os.O_WRONLY | os.O_CREAT | os.O_EXCL | _NOFOLLOW | getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_BINARY", 0)
_UMASK: list[int] = []
_UMASK_LOCK = threading.Lock()

#: name of a temporary file of this module: ``.NAME.TOKEN.partial.SUFFIX`` (a leftover of a killed write)
PARTIAL = re.compile(r"^\..+\.[0-9a-f]{16}\.partial(\.[^.]*)?$")


def umask() -> int:
    """The process's umask (read once; a umask of 0o022 gives files 0o644 and folders 0o755)."""
    with _UMASK_LOCK:
        if not _UMASK:
            _UMASK.append(_read_umask())
        return _UMASK[0]


def _read_umask() -> int:
    try:  # Linux >= 4.7 shows it without changing it (changing it would race with other threads)
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("Umask:"):
                return int(line.split()[1], 8)
    except (OSError, ValueError, IndexError):
        pass
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def file_mode() -> int:
    """Mode of a new file: 0o666 less the umask."""
    return 0o666 & ~umask()


def folder_mode() -> int:
    """Mode of a new folder: 0o777 less the umask."""
    return 0o777 & ~umask()


def fsync_folder(path: Path) -> None:
    """Make a rename or a new entry in ``path`` durable (a no-op where folders cannot be opened)."""
    if os.name == "nt":
        return
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _fresh(path: Path) -> tuple[int, Path]:
    """A new, empty, exclusively created temporary file beside ``path`` (mode 0o600 until it is done)."""
    while True:
        tmp = path.with_name(f".{path.name}.{secrets.token_hex(8)}.partial{path.suffix}")
        try:
            return os.open(tmp, _FLAGS, 0o600), tmp
        except FileExistsError:
            continue


def _finish(fd: int, tmp: Path, path: Path) -> None:
    """fsync and set the mode of the open temporary file ``fd`` (closed here, whatever happens), then
    rename it over ``path`` and make the rename durable."""
    try:
        os.fsync(fd)
        if os.chmod in os.supports_fd:
            os.chmod(fd, file_mode())
        else:
            os.chmod(tmp, file_mode())
    finally:
        os.close(fd)
    os.replace(tmp, path)
    fsync_folder(path.parent)


@contextmanager
def replacing(path: str | Path, text: bool = False):
    """Write ``path`` atomically through the file object this yields (binary, or UTF-8 text)."""
    path = Path(path)
    fd, tmp = _fresh(path)
    try:
        with os.fdopen(fd, "w" if text else "wb", closefd=False,
                       **({"encoding": "utf-8", "newline": ""} if text else {})) as f:
            yield f
            f.flush()
    except BaseException:
        os.close(fd)
        _unlink(tmp)
        raise
    try:
        _finish(fd, tmp, path)
    except BaseException:
        _unlink(tmp)
        raise


@contextmanager
def replacing_path(path: str | Path):
    """Write ``path`` atomically with a writer that needs a file name (meshio, matplotlib, VTK): this yields
    the temporary file's name (same folder, same suffix).  The file must still be the one created here when
    the writer is done (same inode, a regular file), else nothing replaces ``path``."""
    path = Path(path)
    fd, tmp = _fresh(path)
    created = os.fstat(fd)
    os.close(fd)
    try:
        yield tmp
        swapped = OSError(f"{tmp} was replaced while it was written; {path} is left as it was")
        try:
            fd = os.open(tmp, os.O_RDWR | _NOFOLLOW | getattr(os, "O_BINARY", 0))
        except OSError as exc:
            if exc.errno == errno.ELOOP:  # a link now stands at the temporary name
                raise swapped from exc
            raise
        now = os.fstat(fd)
        if (now.st_dev, now.st_ino) != (created.st_dev, created.st_ino):
            os.close(fd)
            raise swapped
        _finish(fd, tmp, path)
    except BaseException:
        _unlink(tmp)
        raise


def _unlink(tmp: Path) -> None:
    try:
        os.unlink(tmp)
    except OSError:
        pass


def write_bytes(path: str | Path, content: bytes) -> Path:
    """Write ``content`` to ``path`` atomically (see the module docstring)."""
    with replacing(path) as f:
        f.write(content)
    return Path(path)


def write_text(path: str | Path, text: str) -> Path:
    """Write UTF-8 ``text`` to ``path`` atomically."""
    return write_bytes(path, text.encode("utf-8"))


def read_toml(path: str | Path, what: str, limit: int) -> dict:
    """The tables of the TOML file ``path`` (a ``what``, e.g. "workflow file"), at most ``limit`` bytes:
    the size is checked before reading and while reading, so a large or endless file is not read whole.
    Every failure is an ``InputError`` that names the file."""
    from . import errors

    path = Path(path)
    try:
        with open(path, "rb") as f:
            info = os.fstat(f.fileno())
            if stat.S_ISDIR(info.st_mode):
                raise IsADirectoryError(path)
            if not stat.S_ISREG(info.st_mode) or info.st_size > limit:
                size = f"{info.st_size / 2**20:.1f} MiB" if stat.S_ISREG(info.st_mode) else "not a regular file"
                raise errors.InputError(f"{path}: refused unread ({size}); a {what} is at most {limit >> 10} KiB")
            data = f.read(limit + 1)
        if len(data) > limit:
            raise errors.InputError(f"{path}: refused: more than {limit >> 10} KiB; a {what} is at most that")
        return tomllib.loads(data.decode("utf-8"))
    except FileNotFoundError:
        raise errors.InputError(f"{path}: {what} not found") from None
    except IsADirectoryError:
        raise errors.InputError(f"{path}: this is a folder; give a {what} (TOML)") from None
    except UnicodeDecodeError:
        raise errors.InputError(f"{path}: not a text file (a {what} is UTF-8 TOML)") from None
    except OSError as exc:
        raise errors.InputError(f"{path}: cannot read the {what} ({exc.strerror or exc})") from None
    except tomllib.TOMLDecodeError as exc:
        raise errors.InputError(f"{path}: TOML syntax error: {exc}") from None
