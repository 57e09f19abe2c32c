"""A solve that stops short keeps its work: the result is written, complete and marked
``converged = false``; the command still fails (exit 1) and the queue shows the job failed
with its result kept."""

from __future__ import annotations

import os
import warnings
from pathlib import Path

import numpy as np
import pytest
import zarr

from sevenfold.cli import main
from sevenfold.errors import SolverError
from sevenfold.export import NotConvergedWarning, open_result
from sevenfold.operator import assemble
from sevenfold.problem import build_problem
from sevenfold.queue import child
from sevenfold.queue.db import Queue
from sevenfold.queue.files import read_runs, write_text_atomic
from sevenfold.queue.home import locate
from sevenfold.queue.submit import submit
from sevenfold.queue.tomlwrite import dumps
from sevenfold.residual_log import log_path, read_log
from sevenfold.runner import run_job
from sevenfold.spec import load_job
from sevenfold.store import is_complete

from conftest import make_spec

JOB = """
name = "short"
physics = "heat"
[grid]
cells = [24, 20, 18]  # above gmg's 16^3 coarsest level, so gmg iterates
size = [0.14, 0.12, 0.10]
[material]
value = 20.0
[[material.region]]
box = {{ min = [0.04, 0.0, 0.0], max = [0.08, 0.12, 0.1] }}
value = 2.0e4
[source]
value = 1.0e4
[boundary]
x_min = {{ type = "dirichlet", value = 300.0 }}
x_max = {{ type = "robin", coefficient = 50.0, reference = 290.0 }}
[[hold]]
box = {{ min = [0.10, 0.04, 0.04], max = [0.12, 0.08, 0.06] }}
value = 310.0
[solver]
method = "{method}"
rtol = 1e-12
max_iterations = {max_iterations}
[output]
path = "results/{{name}}.zarr"
fields = ["heat_flux"]
[[probe]]
name = "mid"
point = [0.07, 0.06, 0.05]
"""


def short_job(folder: Path, method: str, max_iterations: int = 2) -> Path:
    path = folder / f"short-{method}.toml"
    path.write_text(JOB.format(method=method, max_iterations=max_iterations))
    return path


def true_relative_residual(job: Path, u: np.ndarray) -> float:
    """||b - A x|| / ||b|| of a stored field, with the assembled CSR matrix (not the solver's
    own operator: the gmg path is matrix-free)."""
    problem = build_problem(load_job(job))
    system = assemble(problem)
    free = system.row >= 0
    x = np.zeros(system.rhs.shape[0])
    x[system.row[free]] = u[free]
    return float(np.linalg.norm(system.rhs - system.matrix @ x) / np.linalg.norm(system.rhs))


@pytest.mark.parametrize("method", ["gmg", "amg"])
def test_max_iterations_writes_the_last_iterate_marked_not_converged(tmp_path: Path, method: str) -> None:
    job = short_job(tmp_path, method)
    with pytest.raises(SolverError, match="did not converge in 2 iterations") as info:
        run_job(job)
    exc = info.value
    out = tmp_path / "results" / "short.zarr"
    assert exc.output == out and is_complete(out)  # complete: every array, then complete = true
    g = zarr.open_group(str(out), mode="r")
    attrs = g.attrs
    assert attrs["converged"] is False and attrs["solver"]["converged"] is False
    solver = attrs["solver"]
    assert solver["stop"] == "max_iterations" and solver["iterations"] == 2
    assert solver["solution_iterate"] == "last" and "did not converge" in solver["stop_message"]
    assert solver["best_relative_residual"] <= solver["final_relative_residual"] * (1 + 1e-6)
    assert solver["final_relative_residual"] > 1e-12  # really short of rtol
    # complete: the solution, the coordinates, the history, derived fields, probes, balance
    for name in ("temperature", "x", "y", "z", "residual_history", "heat_flux_x", "heat_flux_z", "probe_mid"):
        assert name in g, name
    assert g["residual_history"].shape == (3,)
    assert "relative_imbalance" in attrs["balance"]
    u = g["temperature"][:]
    assert np.isfinite(u).all()
    held = build_problem(load_job(job)).held
    assert np.all(u[held] == 310.0)  # held values in place, as in a converged result
    # the stored field is the iterate whose true residual the attributes report
    r = true_relative_residual(job, u)
    assert r == pytest.approx(solver["final_relative_residual"], rel=1e-6)
    end = list(read_log(log_path(out)))[-1]
    assert end["event"] == "end" and end["converged"] is False and end["result"] == str(out)


def test_the_cli_exits_1_and_names_the_kept_result(tmp_path: Path, capsys) -> None:
    job = short_job(tmp_path, "gmg")
    assert main(["run", "--quiet", str(job)]) == 1
    err = " ".join(capsys.readouterr().err.split())
    assert "did not converge" in err and "NOT converged" in err
    assert str(tmp_path / "results" / "short.zarr") in err


def test_a_converged_result_says_so_and_opens_without_warning(tmp_path: Path) -> None:
    job = short_job(tmp_path, "gmg", max_iterations=500)
    text = job.read_text().replace("rtol = 1e-12", "rtol = 1e-8")
    job.write_text(text)
    result = run_job(job)
    attrs = zarr.open_group(str(result.output), mode="r").attrs
    assert attrs["converged"] is True and attrs["solver"]["stop"] == "converged"
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        opened = open_result(result.output)
    assert opened.converged and opened.warning is None


def test_open_show_report_and_export_make_the_state_visible(tmp_path: Path, capsys) -> None:
    job = short_job(tmp_path, "gmg")
    with pytest.raises(SolverError):
        run_job(job)
    out = tmp_path / "results" / "short.zarr"
    with pytest.warns(NotConvergedWarning, match="NOT converged"):
        opened = open_result(out)
    assert not opened.converged and "max_iterations" in opened.warning
    assert main(["report", str(out), "--folder", str(tmp_path / "rep")]) == 0
    assert "warning: NOT converged" in " ".join(capsys.readouterr().err.split())
    assert "Warning: NOT converged" in (tmp_path / "rep" / "index.html").read_text()
    assert main(["export", str(out), "--vti", str(tmp_path / "short.vti")]) == 0
    assert "warning: NOT converged" in " ".join(capsys.readouterr().err.split())


def test_stagnation_and_the_accuracy_floor_carry_the_last_iterate() -> None:
    """pcg itself: each way of stopping short hands back its iterate and why it stopped."""
    from sevenfold.solvers.cg import pcg, relative_residual

    system = assemble(build_problem(make_spec(
        grid={"cells": [6, 5, 4], "size": [1.0, 1.0, 1.0]}, source={"value": 1.0},
        boundary={"x_min": {"type": "dirichlet", "value": 0.0}})))
    A, b = system.matrix, system.rhs
    with pytest.raises(SolverError, match="stagnated") as info:
        pcg(A, b, lambda r: r / A.diagonal(), 1e-30, 10_000, stagnation_window=8)
    p = info.value.partial
    assert p.stop == "stagnation" and not p.converged
    assert p.final_relative_residual == pytest.approx(relative_residual(A, p.x, b), rel=1e-12)
    assert p.iterations == len(info.value.history) - 1

    rng = np.random.default_rng(3)

    class Noisy:  # products with random errors of 1e-6: b - Ax cannot fall to 1e-8
        shape = A.shape

        def __matmul__(self, v):
            w = A @ v
            return w + 1e-6 * np.linalg.norm(w) * rng.standard_normal(w.shape) / np.sqrt(w.size)

    with pytest.raises(SolverError, match="restarts") as info:
        pcg(Noisy(), b, lambda r: r / A.diagonal(), 1e-8, 500)
    p = info.value.partial
    assert p.stop == "accuracy_floor" and p.final_relative_residual > 1e-8
    assert relative_residual(A, p.x, b) < 1e-4  # a usable iterate, far below the start's 1


def test_a_breakdown_keeps_no_result(tmp_path: Path) -> None:
    """Non-finite or indefinite: nothing worth keeping, so no partial (and no result)."""
    from sevenfold.solvers.cg import pcg

    A = -np.eye(4)
    with pytest.raises(SolverError, match="broke down") as info:
        pcg(A, np.ones(4), lambda r: r.copy(), 1e-8, 10)
    assert info.value.partial is None


def test_the_queue_fails_the_job_and_keeps_its_result(tmp_path: Path, capsys) -> None:
    """The slot child's reply fails the job, the error names the kept result, and ``show``
    says the result is complete but not converged."""
    home = locate(tmp_path / "home")
    with Queue(home) as q:
        (j,) = submit(q, [short_job(tmp_path, "gmg")])
        c = q.claim("w").claim
    write_text_atomic(home.job_file(j.id), dumps(c.job_table))
    reply = child.execute({"job": j.id, "run": c.run_id, "attempt": 1, "output": c.output, "worker": "w"},
                          home, child.ChildState(os.getppid()))
    assert reply["status"] == "failed" and reply["kind"] == "solver"
    assert reply["result"] == c.output and c.output in reply["error"] and "not converged" in reply["error"]
    with Queue(home) as q:
        assert q.fail(j.id, c.run_id, reply["error"])  # what the slot does with a failed reply
        failed = q.get(j.id)
    assert failed.state == "failed" and c.output in failed.error
    out = Path(c.output)
    assert is_complete(out) and zarr.open_group(str(out), mode="r").attrs["converged"] is False
    assert zarr.open_group(str(out), mode="r").attrs["queue"]["run"] == c.run_id
    assert [r["event"] for r in read_runs(out)] == ["start", "not converged"]
    assert main(["show", str(j.id), "--home", str(home.root)]) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "complete, NOT converged" in text and "warning: NOT converged: max_iterations, best relative residual" in text
    assert "failed" in text and "relative imbalance" in text
