"""The results folder of a run: checked while planning, locked while a run writes it, its summary read back.

A results folder is checked before anything is solved: not the file system's root, a system folder or
the home folder itself; no part of its path an existing file; not a folder holding someone else's
files (a folder that exists must hold a ``summary.json`` thermochain wrote, or only files a run writes).
A run holds the folder's lock (``.thermochain.lock`` in it) from its first write to its last, so two
runs never leave a folder that mixes their files: the second waits.
"""

from __future__ import annotations

import json
import logging
import os
import sys
from contextlib import contextmanager
from pathlib import Path

from .. import errors, files

log = logging.getLogger(__name__)

LOCK = ".thermochain.lock"
#: files a run writes (the stage kinds' VTU files and figures, the report, the summaries)
WRITTEN_SUFFIXES = (".vtu", ".png", ".pvd", ".html", ".json", ".csv")
#: folders a results folder may not be, nor lie below (system folders)
_BELOW = ("/bin", "/boot", "/dev", "/etc", "/lib", "/lib32", "/lib64", "/libx32", "/proc", "/sbin", "/sys", "/usr",
          "/System", "/Library", "/private/etc")
_EXACTLY = ("/", "/var", "/run", "/tmp", "/home", "/Users", "/Applications", "/private", "/private/tmp",
            "/private/var", "/opt", "/srv", "/mnt", "/media")


def _system(folder: Path) -> bool:
    """Whether ``folder`` (resolved) is the root, the home folder, or a system folder or one below it."""
    if folder.parent == folder or folder == Path.home().resolve():
        return True
    if sys.platform == "win32":
        windows = Path(os.environ.get("SystemRoot", r"C:\Windows")).resolve()
        programs = [Path(os.environ[v]).resolve() for v in ("ProgramFiles", "ProgramFiles(x86)") if v in os.environ]
        return any(folder == p or p in folder.parents for p in [windows, *programs])
    text = folder.as_posix()
    return text in _EXACTLY or any(text == b or text.startswith(b + "/") for b in _BELOW)


def results_problems(folder: Path, where: str) -> list[str]:
    """Why ``folder`` cannot be a run's results folder (empty when it can); ``where`` names the key."""
    resolved = folder.resolve()
    if _system(resolved):
        return [f"{where}: {folder} is {'the root of the file system' if resolved.parent == resolved else 'a system folder or the home folder'}"
                f" ({resolved}); give a folder of its own for the results, e.g. 'results'"]
    for part in [resolved, *resolved.parents]:
        if part.exists() and not part.is_dir():
            return [f"{where}: {folder}: {part} is an existing file, not a folder; give a folder for the results"]
    existing = next(p for p in [resolved, *resolved.parents] if p.exists())
    if not os.access(existing, os.W_OK | os.X_OK):
        return [f"{where}: {folder}: {existing} cannot be written (permission denied); give a folder you can write"]
    if not resolved.is_dir():
        return []
    summary = resolved / "summary.json"
    if summary.exists():
        problem = _foreign(summary)
        return [f"{where}: {folder} holds a summary.json that is not a thermochain run's ({problem}); give a new "
                "or empty folder, or the results folder of a run"] if problem else []
    foreign = sorted(p.name for p in resolved.iterdir() if not _written_by_a_run(p))
    if foreign:
        return [f"{where}: {folder} holds files no run writes ({', '.join(foreign[:5])}"
                f"{', ...' if len(foreign) > 5 else ''}) and no summary.json; give a new or empty folder, or the "
                "results folder of a run"]
    return []


def _written_by_a_run(path: Path) -> bool:
    name = path.name
    return (path.is_file() and not path.is_symlink() and path.suffix in WRITTEN_SUFFIXES) or name == LOCK \
        or bool(files.PARTIAL.match(name))


def _foreign(path: Path) -> str:
    """Why ``path`` is not a summary.json thermochain wrote ('' when it is one)."""
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        return f"it cannot be read as JSON: {type(exc).__name__}"
    if not isinstance(data, dict) or not isinstance(data.get("thermochain"), str) \
            or not isinstance(data.get("stages"), dict) or not isinstance(data.get("workflow_path"), str):
        return "it has no thermochain version, workflow_path and stages"
    return ""


def own_summary(folder: Path) -> dict:
    """The summary.json of a finished run in ``folder``; ``InputError`` for a folder without one, a
    summary that is not thermochain's, or the summary of a run that failed or was interrupted."""
    path = folder / "summary.json"
    if not path.is_file():
        raise errors.InputError(f"{folder}: no summary.json here; give the results folder of a run")
    problem = _foreign(path)
    if problem:
        raise errors.InputError(f"{path}: not the summary of a thermochain run ({problem}); give the results "
                                "folder of a run")
    data = json.loads(path.read_text(encoding="utf-8"))
    if data.get("status") != "ok":
        raise errors.InputError(f"{path}: the run did not finish (status {data.get('status')!r}); run the workflow "
                                "again to get a complete results folder")
    bad = [n for n, st in data["stages"].items() if not (isinstance(st, dict) and isinstance(st.get("kind"), str)
                                                         and isinstance(st.get("key"), str))]
    if bad or not isinstance(data.get("store"), str) or not isinstance(data.get("sets", []), list):
        raise errors.InputError(f"{path}: incomplete summary (stages {', '.join(bad) or 'fine'}; store, sets); "
                                "run the workflow again")
    if not Path(data["workflow_path"]).is_file():
        raise errors.InputError(f"{path}: workflow_path: the workflow {data['workflow_path']} of this run is not "
                                "there any more")
    return data


@contextmanager
def results_lock(folder: Path, say):
    """Hold ``folder``'s lock while a run writes it (a second run waits, saying so)."""
    import filelock

    folder.mkdir(parents=True, exist_ok=True)
    lock = filelock.FileLock(folder / LOCK, is_singleton=True)
    try:
        lock.acquire(timeout=0)
    except filelock.Timeout:
        line = f"{folder}: another run is writing this results folder; waiting for it to finish"
        log.warning("%s", line)
        say(line)
        lock.acquire()
    try:
        yield
    finally:
        lock.release()
