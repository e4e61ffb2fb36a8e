"""Faults: runs killed while writing, damaged entries, failed writes, concurrent runs on one store.

The model is the small invented two-part box of test_bad_input (heat -> map -> stress).  Results are
compared bit for bit: the same inputs go through the same deterministic code (sparse direct solves),
so a reused or recomputed entry must equal the clean one exactly.
"""

from __future__ import annotations

import errno
import json
import multiprocessing
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pytest

from pipeline import cli
from pipeline.flow import runner
from pipeline.flow import store as store_mod
from pipeline.model import units
from test_bad_input import BASE, tree, visible, write_box

STAGES = ("heat", "strain", "stress")
KILLS = 20

units.to_si("1 K", "K")  # build pint's unit registry once: the forked children below inherit it


@pytest.fixture
def model(tmp_path):
    write_box(tmp_path / "box.msh")
    (tmp_path / "base.toml").write_text(BASE)
    return tmp_path / "base.toml"


@pytest.fixture(scope="module")
def clean_run(tmp_path_factory):
    """A store holding a clean run of the base workflow, and that run's summary (copied by each test)."""
    folder = tmp_path_factory.mktemp("clean")
    write_box(folder / "box.msh")
    (folder / "base.toml").write_text(BASE)
    record = runner.run(folder / "base.toml", store=folder / "store", out=folder / "out")
    return folder / "store", record


@pytest.fixture
def filled(model, clean_run, tmp_path):
    """This test's own copy of the clean store, beside its own model: (store, clean summary)."""
    shutil.copytree(clean_run[0], tmp_path / "store")
    return tmp_path / "store", clean_run[1]


def entries(store: Path) -> dict[tuple[str, str], dict[str, np.ndarray]]:
    """Every visible entry of a store, verified, as its arrays; a damaged or partial entry fails here."""
    out = {}
    s = store_mod.Store(store)
    for kind in sorted(p for p in store.iterdir() if p.is_dir()) if store.is_dir() else []:
        for place in sorted(kind.iterdir()):
            if place.name.startswith("."):
                continue  # lock files and interrupted writes: hidden, never read as entries
            got = s.get(kind.name, place.name)
            assert isinstance(got, tuple), f"{place}: {got}"
            out[(kind.name, place.name)] = got[0]
    assert len(out) == len(s.entries())
    return out


def figures(record: dict) -> dict:
    """A summary without what legitimately differs between runs (timings, statuses and reasons)."""
    out = {}
    for name, stage in record["stages"].items():
        stage = {k: v for k, v in stage.items() if k not in ("status", "reason", "seconds")}
        stage.get("solver", {}).pop("seconds", None)
        stage.get("solver", {}).pop("setup_seconds", None)
        out[name] = stage
    return json.loads(json.dumps(out, sort_keys=True))


def assert_same_arrays(a: dict, b: dict) -> None:
    assert a.keys() == b.keys()
    for name in a:
        np.testing.assert_array_equal(a[name], b[name], err_msg=name)


# ------------------------------------------------------------------------------------- child processes

def _context():
    """Processes forked from this one, which has imported the package and built pint's registry: each
    is a separate process that opens its own files and locks, without the seconds a fresh interpreter
    spends importing (the final run of the kill test goes through a fresh ``python -m pipeline``)."""
    return multiprocessing.get_context("fork")


def _child(args: list[str], conn=None, barrier=None) -> None:
    """In a child process: the real command.  With ``conn``, each store write is announced to the parent,
    which answers "go" and may then kill this process at a random moment of the write.  With ``barrier``,
    the children start together."""
    if conn is not None:
        original = store_mod.Store.put

        def announced(self, kind, *a, **kw):
            conn.send(kind)
            conn.recv()
            start = time.perf_counter()
            place = original(self, kind, *a, **kw)
            conn.send(time.perf_counter() - start)
            return place

        store_mod.Store.put = announced
    if barrier is not None:
        barrier.wait()
    os._exit(cli.main(args))


def _receive(conn, proc, timeout: float = 60.0):
    """The child's next message; a child that died or hangs fails the test instead of blocking it."""
    deadline = time.monotonic() + timeout
    while not conn.poll(0.05):
        assert proc.is_alive() and time.monotonic() < deadline, f"child ended or hung (exit {proc.exitcode})"
    return conn.recv()


# ---------------------------------------------------------------------------------------------- SIGKILL


def test_runs_killed_while_writing_never_leave_a_partial_entry(model, tmp_path):
    ctx = _context()
    rng = np.random.default_rng(7)
    store = tmp_path / "store"

    def start(sets, target_store):
        parent, child = ctx.Pipe()
        args = ["-q", "run", str(model), "--store", str(target_store), "--out", str(tmp_path / "out")]
        args += [f"--set={x}" for x in sets] + [f"--rerun={name}" for name in STAGES]  # every stage writes
        proc = ctx.Process(target=_child, args=(args, child))
        proc.start()
        return proc, parent

    # first timing: a clean run gives the reference results and how long each write takes
    proc, conn = start([], tmp_path / "clean")
    durations = []
    for _ in STAGES:
        _receive(conn, proc)
        conn.send("go")
        durations.append(_receive(conn, proc))
    proc.join(60)
    assert proc.exitcode == 0
    clean = entries(tmp_path / "clean")
    window = 1.25 * float(np.median(durations))  # a little past a typical write, so its last steps are hit too

    interrupted, leftovers, kills, attempts = 0, set(), 0, 0
    while kills < KILLS:
        attempts += 1
        assert attempts <= 2 * KILLS, "most runs ended before their kill; the write window is mismeasured"
        # even runs replace the base entries (--rerun), odd runs write new entries of a variant
        sets = [] if attempts % 2 else [f"stages.heat.power.upper={0.40 + 0.01 * attempts}"]
        target = int(rng.integers(len(STAGES)))
        proc, conn = start(sets, store)
        for n, _ in enumerate(STAGES):
            kind = _receive(conn, proc)
            conn.send("go")
            if n == target:
                time.sleep(rng.uniform(0.0, window))
                os.kill(proc.pid, signal.SIGKILL)
                break
            _receive(conn, proc)
        proc.join(60)
        assert proc.exitcode in (-signal.SIGKILL, 0)  # 0: the run ended before the kill (a loaded machine)
        kills += proc.exitcode == -signal.SIGKILL
        hidden = {p for p in (store / kind).iterdir() if p.is_dir() and p.name.startswith(".")}
        interrupted += bool(hidden - leftovers)  # this kill left a temporary folder: it landed inside the write
        leftovers |= hidden
        entries(store)  # every visible entry is whole and verifies
    print(f"{interrupted} of {KILLS} kills landed inside a write; {attempts} runs; window {window * 1e3:.1f} ms")
    assert interrupted >= 1, "no kill landed inside a write; the test did not test what it claims"

    # the next run, through the installed command, completes with the clean run's results
    out = tmp_path / "final"
    r = subprocess.run([sys.executable, "-m", "pipeline", "-q", "run", str(model), "--store", str(store),
                        "--out", str(out)], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    final = entries(store)
    record = json.loads((out / "summary.json").read_text())
    for name in STAGES:
        key = (record["stages"][name]["kind"], record["stages"][name]["key"])
        assert_same_arrays(final[key], clean[key])


# -------------------------------------------------------------------------------------- damaged entries

def _flip(path: Path) -> None:
    data = bytearray(path.read_bytes())
    data[len(data) // 2] ^= 0x01
    path.write_bytes(bytes(data))


DAMAGE = {
    "arrays_altered": ("arrays.npz", _flip, "arrays.npz fails its checksum"),
    "arrays_truncated": ("arrays.npz", lambda p: p.write_bytes(p.read_bytes()[: p.stat().st_size // 3]),
                         "arrays.npz fails its checksum"),
    "meta_altered": ("meta.json", lambda p: p.write_text(p.read_text().replace("1", "2", 1)),
                     "meta.json fails its checksum"),
    "arrays_missing": ("arrays.npz", lambda p: p.unlink(), "could not be read"),
    "manifest_truncated": ("manifest.json", lambda p: p.write_text(p.read_text()[:40]), "could not be read"),
}


@pytest.mark.parametrize("damage", sorted(DAMAGE))
@pytest.mark.parametrize("stage", ["heat", "stress"])
def test_a_damaged_entry_is_detected_reported_and_recomputed(model, filled, tmp_path, capsys, damage, stage):
    store, first = filled
    before = entries(store)
    kind, key = first["stages"][stage]["kind"], first["stages"][stage]["key"]
    name, spoil, reason = DAMAGE[damage]
    spoil(store / kind / key / name)
    capsys.readouterr()
    assert cli.main(["run", str(model), "--store", str(store), "--out", str(tmp_path / "out")]) == 0
    printed = capsys.readouterr().out
    assert f"stage {stage} ({kind}): computed - {stage} computed: the stored entry" in printed and reason in printed
    record = json.loads((tmp_path / "out" / "summary.json").read_text())
    statuses = {n: s["status"] for n, s in record["stages"].items()}
    assert statuses == {n: "computed" if n == stage else "reused" for n in STAGES}
    after = entries(store)  # whole again
    assert after.keys() == before.keys()
    for k in before:
        assert_same_arrays(after[k], before[k])
    assert figures(record) == figures(first)


# ---------------------------------------------------------------------------------------- failed writes

def _failing(errno_code: int):
    def fail(*args, **kwargs):
        raise OSError(errno_code, os.strerror(errno_code))
    return fail


def _inside(store: Path, original, errno_code: int):
    """``original`` but failing for paths inside the store (a read-only store, not a read-only machine)."""
    def wrapped(*args, **kwargs):
        paths = [str(a) for a in args] + [str(v) for v in kwargs.values()]
        if any(p.startswith(str(store)) for p in paths):
            raise OSError(errno_code, os.strerror(errno_code))
        return original(*args, **kwargs)
    return wrapped


FAILURES = {  # what breaks -> (how to patch it, the words the user sees)
    "disk_full_while_writing": (lambda mp, store: mp.setattr(store_mod, "_write_synced", _failing(errno.ENOSPC)),
                                "No space left on device"),
    "read_only_folder": (lambda mp, store: mp.setattr(tempfile, "mkdtemp",
                                                      _inside(store, tempfile.mkdtemp, errno.EROFS)),
                         "Read-only file system"),
    "rename_refused": (lambda mp, store: mp.setattr(os, "rename", _inside(store, os.rename, errno.EROFS)),
                       "Read-only file system"),
    "sync_fails_everywhere": (lambda mp, store: mp.setattr(os, "fsync", _failing(errno.EIO)), "Input/output error"),
}


@pytest.mark.parametrize("failure", sorted(FAILURES))
def test_a_failed_write_is_a_clear_error_and_earlier_entries_stay(model, filled, tmp_path, capsys, monkeypatch,
                                                                failure):
    store, _ = filled
    before = visible(tree(store))
    patch, words = FAILURES[failure]
    variant = ["--set", 'stages.stress.materials={ lower = "copper_c11000" }']  # a new stress entry only
    with monkeypatch.context() as mp:
        patch(mp, store)
        capsys.readouterr()
        status = cli.main(["run", str(model), "--store", str(store), "--out", str(tmp_path / "v")] + variant)
    err = capsys.readouterr().err
    assert status == 1, err
    assert "Traceback" not in err
    assert f"store {store}: cannot write the stress entry ({words}); earlier entries are intact" in err
    after = tree(store)
    assert visible(after) == before
    assert not [p for p in store.glob("*/.*") if p.is_dir()]  # no half-written folder left behind
    # nothing was lost silently: the same run without the fault stores the entry
    assert cli.main(["-q", "run", str(model), "--store", str(store), "--out", str(tmp_path / "v")] + variant) == 0
    assert len(entries(store)) == 4


# ------------------------------------------------------------------------------------ concurrent runs

VARIANTS = {  # four overlapping workflows: the same, the same again, a stress-only change, a map change
    "a.toml": "",
    "b.toml": "",
    "c.toml": '[stages.stress]\nmaterials = { lower = "copper_c11000" }\n',
    "d.toml": '[stages.strain]\nreference = "30 degC"\n',
}


def test_four_overlapping_runs_at_once_compute_each_entry_once(model, tmp_path):
    folder = model.parent
    for name, extra in VARIANTS.items():
        (folder / name).write_text(f'extends = "base.toml"\n{extra}')
    store = tmp_path / "shared"
    ctx = _context()
    barrier = ctx.Barrier(len(VARIANTS))
    procs = [ctx.Process(target=_child, args=(["-q", "run", str(folder / name), "--store", str(store), "--out",
                                               str(tmp_path / f"out_{name}")], None, barrier)) for name in VARIANTS]
    for p in procs:
        p.start()
    for p in procs:
        p.join(120)
        assert p.exitcode == 0
    records = {n: json.loads((tmp_path / f"out_{n}" / "summary.json").read_text()) for n in VARIANTS}
    computed: dict[tuple[str, str], int] = {}
    for record in records.values():
        for stage in record["stages"].values():
            k = (stage["kind"], stage["key"])
            computed[k] = computed.get(k, 0) + (stage["status"] == "computed")
    assert len(computed) == 6  # heat once; map for 25 and 30 degC; stress for three inputs
    assert set(computed.values()) == {1}, computed
    shared = entries(store)
    # the same workflows one after another on a fresh store
    serial_store = tmp_path / "serial"
    for name in VARIANTS:
        serial = runner.run(folder / name, store=serial_store, out=tmp_path / f"serial_{name}")
        assert figures(serial) == figures(records[name])
    serial_entries = entries(serial_store)
    assert serial_entries.keys() == shared.keys()
    for k in shared:
        assert_same_arrays(shared[k], serial_entries[k])


# ------------------------------------------------------------------------- the store's identity and trust
# Issue 22 (b), (d): a store says it is one; cleaning deletes only verified entries, never through a link,
# and reports exactly what it removed; an entry written without the user's store key is a miss.

def _clean(store: Path, capsys, days: str = "0") -> tuple[int, str, str]:
    capsys.readouterr()
    status = cli.main(["store", str(store), "--clean", days])
    out = capsys.readouterr()
    return status, out.out, out.err


def _snapshot(folder: Path) -> dict[str, str]:
    """Every path under folder (links as links, not followed) with its content digest or link target."""
    out = {}
    for p in sorted(folder.rglob("*")):
        rel = str(p.relative_to(folder))
        out[rel] = f"-> {os.readlink(p)}" if p.is_symlink() else tree(p.parent).get(p.name, "dir") \
            if p.is_file() else "dir"
    return out


def test_cleaning_a_folder_that_is_not_a_store_deletes_nothing(tmp_path, capsys):
    project = tmp_path / "project"  # the wrong folder: a project with a manifest.json two levels down
    (project / "docs" / "notes").mkdir(parents=True)
    (project / "docs" / "notes" / "manifest.json").write_text('{"written": 0}')
    (project / "src").mkdir()
    (project / "src" / "main.py").write_text("print('hello')\n")
    (project / "src" / ".cache.tmp").mkdir()  # a hidden folder that looks like a leftover
    before = _snapshot(project)
    status, out, err = _clean(project, capsys)
    assert status == 2 and "Traceback" not in err
    assert f"{project}: not a thermochain store (no thermochain-store.json at its root)" in err
    assert _snapshot(project) == before


def test_cleaning_removes_exactly_the_old_entries_and_reports_them(filled, tmp_path, capsys):
    store, _ = filled
    ours = store / "heat" / ".cache"  # a hidden folder that is not a leftover of ours
    ours.mkdir()
    (ours / "keep.txt").write_text("not thermochain's")
    stray = store / "heat" / ("f" * 64)  # named like an entry but holding other files
    stray.mkdir()
    (stray / "notes.txt").write_text("mine")
    status, out, err = _clean(store, capsys)
    assert status == 0, err
    assert "removed 3 entries" in out
    assert (ours / "keep.txt").read_text() == "not thermochain's"
    assert (stray / "notes.txt").read_text() == "mine"
    assert not [p for p in store.glob("*/*") if len(p.name) == 64 and p != stray]


def test_cleaning_never_follows_a_link_out_of_the_store(filled, tmp_path, capsys):
    store, _ = filled
    outside = tmp_path / "outside"
    key = "a" * 64
    (outside / key).mkdir(parents=True)  # an entry-shaped folder outside the store
    for name in store_mod.ENTRY_FILES:
        (outside / key / name).write_text("precious")
    (store / "elsewhere").symlink_to(outside, target_is_directory=True)  # a linked kind folder
    linked_key = "b" * 64
    (store / "heat" / linked_key).symlink_to(outside / key, target_is_directory=True)  # a linked entry
    before = _snapshot(outside)
    s = store_mod.Store(store)
    done = s.clean(0)
    assert _snapshot(outside) == before
    assert (store / "heat" / linked_key).is_symlink()
    assert {e.key for e in done.removed} | {linked_key} != {e.key for e in done.removed}  # not reported removed
    assert len(done.removed) == 3
    kept = {p.name: why for p, why in done.kept}
    assert "link" in kept["elsewhere"]
    assert linked_key in kept


def test_a_forged_entry_is_a_miss_and_is_recomputed(model, filled, tmp_path, capsys):
    """Someone edits an entry's meta.json and updates its manifest's checksum to match (a consistent
    forgery): without the store key the manifest's HMAC cannot be made, so the entry is not reused."""
    store, first = filled
    place = next((store / "heat").glob("?" * 64))
    meta = json.loads((place / "meta.json").read_text())
    meta["forged"] = True
    content = store_mod.canonical(meta).encode()
    (place / "meta.json").write_bytes(content)
    manifest = json.loads((place / "manifest.json").read_text())
    manifest["files"]["meta.json"] = __import__("hashlib").sha256(content).hexdigest()
    (place / "manifest.json").write_text(json.dumps(manifest))
    record = runner.run(model, store=store, out=tmp_path / "out")
    assert record["stages"]["heat"]["status"] == "computed"
    assert "not signed with your store key" in record["stages"]["heat"]["reason"]
    assert "forged" not in json.loads((place / "meta.json").read_text())  # replaced by a genuine entry


def test_an_entry_written_with_another_users_key_is_a_miss(model, filled, tmp_path, monkeypatch):
    store, _ = filled
    other = tmp_path / "other.key"
    monkeypatch.setenv(store_mod.KEY_ENV, str(other))  # another user: another key file
    record = runner.run(model, store=store, out=tmp_path / "out")
    assert {s["status"] for s in record["stages"].values()} == {"computed"}
    assert other.stat().st_mode & 0o777 == 0o600  # a new key is private


def test_a_store_every_user_can_write_is_refused(model, filled, tmp_path, capsys):
    store, _ = filled
    os.chmod(store, 0o777)
    try:
        capsys.readouterr()
        status = cli.main(["run", str(model), "--store", str(store), "--out", str(tmp_path / "out")])
    finally:
        os.chmod(store, 0o755)
    err = capsys.readouterr().err
    assert status == 2 and "Traceback" not in err
    assert "every user can write this store" in err and "chmod o-w" in err


def test_a_run_refuses_a_store_folder_that_holds_other_things(model, tmp_path, capsys):
    project = tmp_path / "project"
    project.mkdir()
    (project / "thesis.tex").write_text("\\documentclass{article}\n")
    capsys.readouterr()
    status = cli.main(["run", str(model), "--store", str(project), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert status == 2 and "Traceback" not in err
    assert f"{project}: not a thermochain store" in err and "thesis.tex" in err
    assert sorted(p.name for p in project.iterdir()) == ["thesis.tex"]


def test_entries_follow_the_users_umask(model, tmp_path, monkeypatch):
    """A team store (umask 002): entry folders and files are group-writable like any file the user makes."""
    from pipeline import files

    monkeypatch.setattr(files, "_UMASK", [])  # read again
    old = os.umask(0o002)
    try:
        runner.run(model, store=tmp_path / "team", out=tmp_path / "out")
    finally:
        os.umask(old)
        files._UMASK.clear()
    place = next((tmp_path / "team" / "heat").glob("?" * 64))
    assert place.stat().st_mode & 0o777 == 0o775
    assert {(place / n).stat().st_mode & 0o777 for n in store_mod.ENTRY_FILES} == {0o664}


def _hold(store: Path, kind: str, k: str, ready, release) -> None:
    with store_mod.Store(store).lock(kind, k):
        ready.set()
        release.wait(30)


def test_cleaning_skips_entries_in_use_and_writes_in_progress(filled, tmp_path):
    """Cleaning takes each entry's lock: an entry a run holds, and the temporary folder of a write in
    progress (its key's lock is held by the writer), are kept; a leftover of a killed write is removed."""
    import threading

    store, _ = filled
    heat = next((store / "heat").glob("?" * 64))
    stress = next((store / "stress").glob("?" * 64))
    live = Path(tempfile.mkdtemp(prefix=f".{stress.name}.", dir=stress.parent))  # a write in progress
    (live / "arrays.npz").write_bytes(b"partial")
    dead_key = "c" * 64
    dead = Path(tempfile.mkdtemp(prefix=f".{dead_key}.", dir=heat.parent))  # a write that was killed
    (dead / "meta.json").write_text("{}")
    ready, release = [threading.Event(), threading.Event()], threading.Event()
    holders = [threading.Thread(target=_hold, args=(store, p.parent.name, p.name, r, release))
               for p, r in ((heat, ready[0]), (stress, ready[1]))]
    for t in holders:
        t.start()
    for r in ready:
        assert r.wait(30)
    try:
        done = store_mod.Store(store).clean(0)
    finally:
        release.set()
        for t in holders:
            t.join()
    assert heat.is_dir() and stress.is_dir() and live.is_dir()
    assert not dead.exists() and done.leftovers == [dead]
    assert [e.kind for e in done.removed] == ["map"]
    assert {p: why for p, why in done.kept} == {heat: "in use by a run (its lock is held)",
                                                 stress: "in use by a run (its lock is held)",
                                                 live: "in use by a run (its lock is held)"}


def test_listing_a_store_with_a_damaged_manifest_is_no_traceback(filled, capsys):
    store, _ = filled
    place = next((store / "heat").glob("?" * 64))
    (place / "manifest.json").write_bytes(b"\xff\xfe not json")
    capsys.readouterr()
    assert cli.main(["store", str(store)]) == 0
    out = capsys.readouterr().out
    assert "3 entries" in out
    assert store_mod.Store(store).entries()[0].problem.startswith("its manifest cannot be read")


def test_cleaning_while_runs_write_breaks_no_run(model, tmp_path):
    """Six runs write a shared store while the store is cleaned (everything older than now) again and
    again: every run succeeds, because cleaning takes each entry's lock and keeps writes in progress."""
    store = tmp_path / "shared"
    materials = ("aluminium_6061_t6", "copper_c11000", "steel_304", "fr4", "aluminium_6061_t6", "steel_304")
    ctx = _context()
    barrier = ctx.Barrier(len(materials) + 1)
    procs = [ctx.Process(target=_child, args=(["-q", "run", str(model), "--store", str(store), "--out",
                                               str(tmp_path / f"out_{i}"), "--set",
                                               f'stages.stress.materials={{ lower = "{m}" }}'], None, barrier))
             for i, m in enumerate(materials)]
    for p in procs:
        p.start()
    barrier.wait()
    cleaned = 0
    while any(p.is_alive() for p in procs):
        if store_mod.Store(store).is_store():
            cleaned += len(store_mod.Store(store).clean(0))
        time.sleep(0.01)
    for p in procs:
        p.join(120)
    assert [p.exitcode for p in procs] == [0] * len(procs)
    assert all(json.loads((tmp_path / f"out_{i}" / "summary.json").read_text())["status"] == "ok"
               for i in range(len(materials)))
    assert cleaned > 0  # the cleaning did remove entries while the runs went on


# ------------------------------------------------------------------------------ the one atomic writer
# Issue 22 (c), issue 14: every write goes to a fresh unpredictable temporary name in the target's folder,
# created without following links, then replaces the target atomically with the user's file mode.

def test_a_planted_link_in_the_results_folder_is_not_written_through(tmp_path):
    from pipeline import files

    outside = tmp_path / "outside.txt"
    outside.write_text("precious")
    results = tmp_path / "results"
    results.mkdir()
    (results / "heat.vtu").symlink_to(outside)  # a link at the target's name
    for name in (".heat.vtu.tmp", ".summary.json.tmp"):  # and at the names the old writers used
        (results / name).symlink_to(outside)
    files.write_text(results / "heat.vtu", "new")
    with files.replacing_path(results / "summary.json") as tmp:
        Path(tmp).write_text("{}")
    assert outside.read_text() == "precious"
    assert not (results / "heat.vtu").is_symlink() and (results / "heat.vtu").read_text() == "new"
    assert (results / "summary.json").read_text() == "{}"
    assert not [p for p in results.iterdir() if files.PARTIAL.match(p.name)]  # no temporary file left


def test_the_temporary_name_is_fresh_and_a_swapped_file_is_refused(tmp_path):
    from pipeline import files

    seen = set()
    for _ in range(3):
        with files.replacing_path(tmp_path / "a.png") as tmp:
            seen.add(Path(tmp).name)
            assert files.PARTIAL.match(Path(tmp).name) and Path(tmp).suffix == ".png"
    assert len(seen) == 3
    outside = tmp_path / "outside"
    outside.write_text("precious")
    with pytest.raises(OSError, match="was replaced while it was written"):
        with files.replacing_path(tmp_path / "b.vtu") as tmp:
            os.unlink(tmp)
            os.symlink(outside, tmp)  # someone swaps the temporary file for a link
    assert not (tmp_path / "b.vtu").exists() and outside.read_text() == "precious"


def test_a_failed_write_leaves_the_old_file_and_no_temporary(tmp_path):
    from pipeline import files

    target = tmp_path / "summary.json"
    target.write_text("old")
    with pytest.raises(RuntimeError):
        with files.replacing(target, text=True) as f:
            f.write("half")
            raise RuntimeError("disk pulled")
    assert target.read_text() == "old"
    assert [p.name for p in tmp_path.iterdir()] == ["summary.json"]


def test_written_files_follow_the_umask(tmp_path, monkeypatch):
    from pipeline import files

    for mask, mode in ((0o022, 0o644), (0o002, 0o664), (0o077, 0o600)):
        monkeypatch.setattr(files, "_UMASK", [mask])
        assert files.write_bytes(tmp_path / f"f{mask:o}", b"x").stat().st_mode & 0o777 == mode


# ------------------------------------------------------------------------------- the results folder

def test_a_second_run_into_the_same_results_folder_waits_for_the_first(model, filled, tmp_path, caplog):
    """Two workflows writing one results folder at once would leave it mixed: a run holds the folder's lock
    from its first write to its last, and a second run waits (saying so) and then writes a whole folder."""
    import threading

    from pipeline.flow import folders

    store, _ = filled
    out = tmp_path / "shared_results"
    other = model.parent / "other.toml"
    other.write_text(model.read_text().replace("[stages.stress]", "[stages.stress_b]"))
    holding, release = threading.Event(), threading.Event()

    def first():
        with folders.results_lock(out, lambda line: None):
            holding.set()
            release.wait(30)

    t = threading.Thread(target=first)
    t.start()
    assert holding.wait(30)
    result = {}
    second = threading.Thread(target=lambda: result.update(r=runner.run(other, store=store, out=out)))
    second.start()
    second.join(1.0)
    assert second.is_alive()  # waiting for the folder
    release.set()
    second.join(60)
    t.join()
    assert "another run is writing this results folder; waiting" in caplog.text
    record = json.loads((out / "summary.json").read_text())
    assert set(record["stages"]) == {"heat", "strain", "stress_b"} and record["status"] == "ok"


def test_every_command_finds_the_same_default_store(model, tmp_path, monkeypatch, capsys):
    """A run without --store and `thermochain store` from another folder see the same store (the user's
    cache folder; here a temporary one)."""
    import platformdirs

    monkeypatch.delenv(store_mod.ENV, raising=False)
    monkeypatch.setattr(platformdirs, "user_cache_path", lambda name: tmp_path / "cache" / name)
    assert cli.main(["-q", "run", str(model), "--out", str(tmp_path / "out")]) == 0
    monkeypatch.chdir(tmp_path / "out")
    capsys.readouterr()
    assert cli.main(["store"]) == 0
    assert f"3 entries" in capsys.readouterr().out
    assert (tmp_path / "cache" / "thermochain" / "store" / store_mod.MARKER).is_file()


def test_results_files_follow_the_umask(model, filled, tmp_path, monkeypatch):
    """summary.json, summary.csv and report.html get the same mode as the figures and VTU files (0664
    with umask 002), not owner-only."""
    from pipeline import files

    store, _ = filled
    monkeypatch.setattr(files, "_UMASK", [])
    old = os.umask(0o002)
    try:
        runner.run(model, store=store, out=tmp_path / "out",
                   sets=["output.report=true", "output.vtu=true"])
    finally:
        os.umask(old)
        files._UMASK.clear()
    modes = {p.name: p.stat().st_mode & 0o777 for p in (tmp_path / "out").iterdir() if not p.name.startswith(".")}
    assert {"summary.json", "summary.csv", "report.html", "results.pvd", "heat.vtu"} <= set(modes)
    assert set(modes.values()) == {0o664}, modes
