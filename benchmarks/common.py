"""Shared pieces of the benchmarks: the benchmark box, child processes with their own peak memory,
medians, and writing tables into docs/performance.md between named markers.

The benchmark problem is invented for measurement only: a 0.1 m aluminium cube meshed by tensor
cells (6 tetrahedra each) with interior nodes jittered by 0.15 h so that the sparsity is that of an
unstructured mesh; 50 W generated in the block, a film coefficient of 10 W/(m^2*K) to 25 degC on all
faces; the face x = 0 clamped.  Run the scripts from the repository root with the test extras and
gmsh installed: ``python benchmarks/scaling.py`` (see docs/performance.md for all commands).
"""

from __future__ import annotations

import json
import os
import platform
import re
import statistics
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
DOC = ROOT / "docs" / "performance.md"
sys.path.insert(0, str(ROOT / "tests"))

SIDE = 0.1  # m
ENV = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1", "MPLBACKEND": "Agg"}


def box(n: int, jitter: float = 0.15):
    """skfem MeshTet of the benchmark cube with n vertices per side."""
    import numpy as np

    import meshes

    x = np.linspace(0, SIDE, n)
    return meshes.tensor(x, x, x, jitter=jitter, seed=1)


def domain(n: int):
    """The benchmark cube as a thermochain Domain (part 'block'; faces xmin ... zmax)."""

    from pipeline.model import mesh as mesh_mod

    m = box(n)
    return mesh_mod.from_meshio(_meshio(m), unit="m")


def _meshio(m):
    import numpy as np

    import meshes

    return meshes.to_meshio(m, {"block": np.arange(m.nelements)}, meshes.faces(m))


def write_case(folder: Path, n: int, heat_order: int = 1, stress_order: int = 2) -> Path:
    """Mesh file (Gmsh 2.2 binary) and workflow file of the benchmark cube; returns the workflow path."""
    import meshes

    folder.mkdir(parents=True, exist_ok=True)
    m = box(n)
    meshes.write_gmsh(_meshio(m), folder / "cube.msh")
    (folder / "cube.toml").write_text(f"""title = "benchmark cube (invented for measurement)"
mesh = {{ file = "cube.msh", unit = "m" }}
[parts.block]
material = "aluminium_6061_t6"
[stages.heat]
kind = "heat"
order = {heat_order}
power = {{ block = 50.0 }}
convection = {{ xmin = {{ film_coefficient = 10.0, ambient = "25 degC" }}, xmax = {{ film_coefficient = 10.0, ambient = "25 degC" }}, ymin = {{ film_coefficient = 10.0, ambient = "25 degC" }}, ymax = {{ film_coefficient = 10.0, ambient = "25 degC" }}, zmin = {{ film_coefficient = 10.0, ambient = "25 degC" }}, zmax = {{ film_coefficient = 10.0, ambient = "25 degC" }} }}
[stages.thermal_strain]
kind = "map"
source = "heat"
reference = "20 degC"
[stages.stress]
kind = "stress"
source = "thermal_strain"
order = {stress_order}
supports = {{ xmin = {{ kind = "fixed" }} }}
[output]
folder = "results"
vtu = true
figures = false
report = false
""")
    return folder / "cube.toml"


#: Layered assembly (invented for measurement): a 0.1 m square stack of an aluminium base, a soft
#: interlayer and a silicon die, as fractions of the height; the interlayer's modulus is the die's
#: divided by the contrast.
LAYERS = {"base": (0.0, 0.4), "interlayer": (0.4, 0.6), "die": (0.6, 1.0)}


def write_layered(folder: Path, n: int, contrast: float = 1e5, poisson: float = 0.45, nz: int | None = None) -> Path:
    """Mesh and workflow of the layered assembly with n vertices per side in x, y and nz (default n)
    in z (a 0.1 m cube, layers by element centroid); heat P1, stress P2, the base's bottom clamped."""
    import numpy as np

    import meshes

    folder.mkdir(parents=True, exist_ok=True)
    x = np.linspace(0, SIDE, n)
    m = meshes.tensor(x, x, np.linspace(0, SIDE, nz or n), jitter=0.15, seed=1)
    parts = meshes.layers(m, 2, {k: (lo * SIDE, hi * SIDE) for k, (lo, hi) in LAYERS.items()})
    meshes.write_gmsh(meshes.to_meshio(m, parts, meshes.faces(m)), folder / "layered.msh")
    film = ", ".join(f'{f} = {{ film_coefficient = 10.0, ambient = "25 degC" }}' for f in
                     ("xmin", "xmax", "ymin", "ymax", "zmin", "zmax"))
    (folder / "layered.toml").write_text(f"""title = "layered assembly (invented for measurement)"
mesh = {{ file = "layered.msh", unit = "m" }}
[materials.soft_layer]
title = "soft interlayer (invented: the die's modulus / {contrast:g})"
conductivity = 3.0
youngs_modulus = {162e9 / contrast!r}
poisson_ratio = {poisson!r}
expansion = 2e-4
density = 2000.0
[parts]
base = {{ material = "aluminium_6061_t6" }}
interlayer = {{ material = "soft_layer" }}
die = {{ material = "silicon" }}
[stages.heat]
kind = "heat"
power = {{ die = 50.0 }}
convection = {{ {film} }}
[stages.thermal_strain]
kind = "map"
source = "heat"
reference = "20 degC"
[stages.stress]
kind = "stress"
source = "thermal_strain"
order = 2
supports = {{ zmin = {{ kind = "fixed" }} }}
[output]
folder = "results"
vtu = true
figures = false
report = false
""")
    return folder / "layered.toml"


class _Captured(Exception):
    pass


def capture(workflow: Path, sets: list[str] | None = None) -> dict:
    """The stress system of ``workflow`` as the stage hands it to the solver: A, b, near_null and
    layout (the heat and map stages run first; nothing is solved for stress)."""
    import tempfile

    from pipeline.flow import runner
    from pipeline.stages import solvers

    seen = {}
    original = solvers.solve

    def grab(A, b, method="auto", rtol=1e-10, near_null=None, maxiter=500, layout=None, memory_limit=None):
        if near_null is None:
            return original(A, b, method, rtol, near_null, maxiter, layout, memory_limit)
        seen.update(A=A, b=b, near_null=near_null, layout=layout)
        raise _Captured()

    solvers.solve = grab
    work = Path(tempfile.mkdtemp(prefix="thermochain-capture-"))
    try:
        runner.run(str(workflow), sets or [], store=str(work / "store"), out=str(work / "out"))
    except _Captured:
        pass
    finally:
        solvers.solve = original
    if not seen:
        raise RuntimeError(f"{workflow}: no stress system was captured")
    return seen


def child(code: str, timeout: float = 3600) -> dict:
    """Run ``code`` (which prints one JSON line last) in a fresh Python; adds its peak RSS [MiB]
    and wall time [s].  A child that fails or runs out of time gives {"error": ...}."""
    env = os.environ | ENV
    start = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-c", code], cwd=ROOT, env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    try:
        out, err = proc.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.communicate()
        return {"error": f"stopped after {timeout:.0f} s"}
    wall = time.perf_counter() - start
    if proc.returncode != 0:
        return {"error": (err.strip().splitlines() or ["failed"])[-1][:200]}
    result = json.loads(out.strip().splitlines()[-1])
    result["wall_s"] = result.get("wall_s", wall)
    return result


PEAK = ("import resource, json\n"
        "def peak_mib():\n"
        "    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024\n")


def median(values):
    values = [v for v in values if v is not None]
    return statistics.median(values) if values else None


def machine() -> str:
    import numpy
    import scipy
    import skfem

    cpu = platform.processor() or platform.machine()
    try:
        with open("/proc/cpuinfo") as f:
            cpu = next(line.split(":", 1)[1].strip() for line in f if line.startswith("model name"))
    except (OSError, StopIteration):
        pass
    mem = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") / 2**30
    return (f"{os.cpu_count()} cores ({cpu}), {mem:.0f} GiB; Python {platform.python_version()}, numpy "
            f"{numpy.__version__}, scipy {scipy.__version__}, scikit-fem {skfem.__version__}; BLAS threads 1; "
            f"{time.strftime('%Y-%m-%d')}")


def write_section(name: str, text: str) -> None:
    """Replace the block between <!-- name --> and <!-- /name --> in docs/performance.md (append if new)."""
    doc = DOC.read_text() if DOC.exists() else "# Performance\n"
    block = f"<!-- {name} -->\n{text.strip()}\n<!-- /{name} -->"
    pattern = re.compile(rf"<!-- {re.escape(name)} -->.*?<!-- /{re.escape(name)} -->", re.S)
    doc = pattern.sub(lambda _m: block, doc) if pattern.search(doc) else doc.rstrip() + "\n\n" + block + "\n"
    DOC.write_text(doc)
    print(text)


def table(header: list[str], rows: list[list]) -> str:
    def cell(v):
        if v is None:
            return "-"
        if isinstance(v, float):
            return f"{v:.3g}" if abs(v) < 1e4 else f"{v:.3e}"
        return str(v)

    lines = ["| " + " | ".join(header) + " |", "|" + "---|" * len(header)]
    lines += ["| " + " | ".join(cell(v) for v in r) + " |" for r in rows]
    return "\n".join(lines)
