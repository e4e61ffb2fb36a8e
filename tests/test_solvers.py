"""The solver layer: choice by size, reuse of a preparation, fallback, failure messages, memory refusal."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
import pytest

import meshes
from pipeline import errors
from pipeline.stages import kernels, solvers


def heat_matrix(n=23):
    """P1 conduction + film matrix of a jittered cube with n^3 unknowns (23^3 = 12167: above every
    direct-solver limit of "auto")."""
    m = meshes.tensor(*[np.linspace(0, 1, n)] * 3, jitter=0.15)
    space, geom = kernels.Space(m, 1), kernels.Geometry(m)
    A = kernels.conduction(space, geom, np.arange(m.nelements), 1.0, 0)
    kernels.Facets(space, geom, m.boundary_facets(), 2).mass(10.0, A)
    return A.matrix()


def test_auto_chooses_by_size_and_both_methods_agree():
    A = heat_matrix()
    b = np.random.default_rng(0).random(A.shape[0])
    assert solvers.choose(A.shape[0]) == "amg" and solvers.choose(100) == "direct"
    x_direct, r_direct = solvers.solve_spd(A, b, "direct")
    x_amg, r_amg = solvers.solve_spd(A, b, "amg")
    assert r_direct.residual < 1e-12 and r_amg.residual < 1e-9  # rtol 1e-10 on the CG residual
    assert np.abs(x_amg - x_direct).max() <= 1e-8 * np.abs(x_direct).max()
    assert r_amg.iterations == len(r_amg.history) - 1 and r_amg.history[-1] < 1e-10


@pytest.mark.parametrize("method", ["direct", "amg"])
def test_a_preparation_serves_several_right_hand_sides(method, monkeypatch):
    import pyamg

    builds = []
    for module, name in ((solvers._Direct, "__init__"), (pyamg, "smoothed_aggregation_solver")):
        original = getattr(module, name)
        monkeypatch.setattr(module, name, lambda *a, _f=original, **k: builds.append(1) or _f(*a, **k))
    A = heat_matrix(12)
    prepared = solvers.Prepared(A, method)
    rng = np.random.default_rng(1)
    records = []
    for _ in range(3):
        b = rng.random(A.shape[0])
        x, rec = prepared.solve(b)
        assert np.linalg.norm(A @ x - b) <= 1e-9 * np.linalg.norm(b)
        records.append(rec)
    assert len(builds) == 1  # one factorisation or hierarchy for the three loads
    assert [r.reused for r in records] == [False, True, True]
    assert {r.setup_seconds for r in records} == {prepared.setup_seconds}


def test_an_amg_solve_that_does_not_converge_names_its_residuals_and_the_direct_solver():
    A = heat_matrix()
    b = np.ones(A.shape[0])
    with pytest.raises(errors.SolverError) as info:
        solvers.solve_spd(A, b, "amg", maxiter=2)
    message = info.value.problems[0]
    assert "did not converge" in message and "last residuals" in message and 'solver = "direct"' in message


def test_auto_falls_back_to_the_direct_solver_and_says_so():
    A = heat_matrix()
    b = np.ones(A.shape[0])
    x, record = solvers.solve_spd(A, b, "auto", maxiter=2)
    assert record.method.startswith("direct (after AMG stalled")
    assert np.linalg.norm(A @ x - b) <= 1e-10 * np.linalg.norm(b)


def test_a_model_too_large_is_refused_with_its_estimate():
    with pytest.raises(errors.InputError) as info:
        solvers.check_memory(2_000_000, 2, 3, "auto", limit=2**30, where="wf.toml: stages.stress")
    text = info.value.problems[0]
    assert text.startswith("wf.toml: stages.stress:") and "2,000,000 unknowns" in text and "GiB" in text
    assert "memory_limit" in text and "coarser mesh or order = 1" in text
    assert solvers.check_memory(10_000, 1, 1, "auto", limit=2**30, where="x") < 2**30


@pytest.mark.parametrize("backend", ["SuperLU", "PARDISO"])
def test_each_direct_backend_solves_symmetric_and_unsymmetric_systems(backend, monkeypatch):
    """PARDISO is optional (the ``direct`` extra); SuperLU is always there."""
    if backend == "PARDISO":
        pytest.importorskip("pypardiso")
    monkeypatch.setattr(solvers, "direct_backend", lambda: backend)
    monkeypatch.setattr(solvers, "SMALL", 0)  # PARDISO is kept for larger models; exercise it here
    A = heat_matrix(10)
    skew = A + 0.1 * sp.triu(A, 1, format="csr")  # unsymmetric, like the tangent of a k(T) problem
    b = np.random.default_rng(2).random(A.shape[0])
    for M in (A, skew):
        x, record = solvers.solve_spd(M, b, "direct")
        assert record.backend == backend and np.linalg.norm(M @ x - b) <= 1e-11 * np.linalg.norm(b)
