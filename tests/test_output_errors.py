"""An output that cannot be written is a bad input: one line naming the path and the operating
system's reason, exit 2, never a traceback; the queue fails the job with the same line.

The tests run as root, whom file modes do not stop, so unwritable places are made otherwise:
a folder under /proc (the kernel refuses to create it), a path whose parent is a regular
file, and a full disk (ENOSPC) by monkeypatching the write that meets it.
"""

from __future__ import annotations

import errno
import os
from pathlib import Path

import pytest

from sevenfold import residual_log, store
from sevenfold.cli import main
from sevenfold.errors import OutputError
from sevenfold.queue import child
from sevenfold.queue.db import Queue
from sevenfold.queue.files import write_text_atomic
from sevenfold.queue.home import locate
from sevenfold.queue.submit import submit
from sevenfold.queue.tomlwrite import dumps
from sevenfold.store import is_complete

from queue_support import small_job

PROC = "/proc/sevenfold-x"
NOSPACE = os.strerror(errno.ENOSPC)

JOB = """
name = "probed"
physics = "heat"
[grid]
cells = [6, 5, 4]
size = [1.0, 1.0, 1.0]
[material]
value = 2.0
[source]
value = 1.0
[boundary]
x_min = { type = "dirichlet", value = 1.0 }
[[probe]]
name = "mid"
point = [0.5, 0.5, 0.5]
[solver]
method = "direct"
[output]
path = "results/{name}.zarr"
"""


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    f = tmp_path_factory.mktemp("outputs")
    (f / "job.toml").write_text(JOB)
    (f / "a-file").write_text("not a folder\n")
    assert main(["run", "-q", str(f / "job.toml")]) == 0
    return f


def one_line_error(capsys) -> str:
    err = capsys.readouterr().err
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    return lines[0]


def bad_places(folder: Path) -> list[tuple[str, str]]:
    """(an output path, the reason the line must give)."""
    return [(f"{PROC}/out", "No such file or directory"),
            (str(folder / "a-file" / "out"), f"{folder / 'a-file'} is a file, not a folder")]


@pytest.mark.parametrize("place", [0, 1])
@pytest.mark.parametrize("command", ["run", "report", "export", "converge"])
def test_an_unwritable_output_is_one_line_and_exit_2(folder: Path, command: str, place: int, capsys) -> None:
    target, reason = bad_places(folder)[place]
    result = str(folder / "results" / "probed.zarr")
    job = str(folder / "job.toml")
    argv = {"run": ["run", job, "-o", target + ".zarr"],
            "report": ["report", result, "--folder", target],
            "export": ["export", result, "--vti", target + ".vti"],
            "converge": ["converge", job, "--folder", target]}[command]
    assert main(argv) == 2
    line = one_line_error(capsys)
    assert line.startswith("error: ") and target in line and reason in line, line


def test_a_full_disk_while_writing_the_probe_table(folder: Path, monkeypatch, capsys) -> None:
    real_open = open

    def full(path, *args, **kwargs):
        if ".probes.csv" in str(path):
            raise OSError(errno.ENOSPC, NOSPACE, str(path))
        return real_open(path, *args, **kwargs)

    monkeypatch.setattr(store, "open", full, raising=False)  # store's own name lookup finds it first
    out = folder / "full" / "p.zarr"
    assert main(["run", "-q", str(folder / "job.toml"), "-o", str(out)]) == 2
    line = one_line_error(capsys)
    assert f"cannot write the probe table {folder / 'full' / 'p.probes.csv'}: {NOSPACE}" in line
    assert not list((folder / "full").glob(".p.probes.csv*"))  # no half-written table


class _FillsUp:
    """A log file whose disk fills after ``room`` lines."""

    def __init__(self, fh, room: int) -> None:
        self.fh, self.room = fh, room

    def write(self, text: str) -> int:
        if self.room <= 0:
            raise OSError(errno.ENOSPC, NOSPACE)
        self.room -= 1
        return self.fh.write(text)

    def flush(self) -> None:
        self.fh.flush()

    def close(self) -> None:
        self.fh.close()


def test_a_full_disk_while_logging_residuals_fails_the_run_with_one_line(folder: Path, monkeypatch,
                                                                       capsys) -> None:
    real_open = open
    monkeypatch.setattr(residual_log, "open", lambda *a, **k: _FillsUp(real_open(*a, **k), 1), raising=False)
    out = folder / "log-full" / "r.zarr"
    amg = folder / "amg.toml"
    amg.write_text(JOB.replace('method = "direct"', 'method = "amg"'))
    assert main(["run", "-q", str(amg), "-o", str(out)]) == 2
    line = one_line_error(capsys)
    assert f"cannot write the residual log {folder / 'log-full' / 'r.residuals.jsonl'}: {NOSPACE}" in line
    assert not out.exists() and not is_complete(out)


def test_a_full_disk_in_report_and_export(folder: Path, monkeypatch, capsys) -> None:
    import pyevtk.hl

    from sevenfold import report

    def full(*args, **kwargs):
        raise OSError(errno.ENOSPC, NOSPACE)

    result = str(folder / "results" / "probed.zarr")
    monkeypatch.setattr(report, "residual_figure", full)
    assert main(["report", result, "--folder", str(folder / "rep")]) == 2
    assert f"cannot write the report folder {folder / 'rep'}: {NOSPACE}" in one_line_error(capsys)
    monkeypatch.setattr(pyevtk.hl, "imageToVTK", full)
    assert main(["export", result, "--vti", str(folder / "e.vti")]) == 2
    assert f"cannot write the VTK file {folder / 'e.vti'}: {NOSPACE}" in one_line_error(capsys)


def test_output_error_is_a_job_error_naming_no_job_file() -> None:
    exc = OutputError.from_os("/r/a.zarr", OSError(errno.EROFS, os.strerror(errno.EROFS), "/r/.a.zarr.partial-1-ab/c"))
    assert str(exc) == f"cannot write /r/a.zarr: {os.strerror(errno.EROFS)}"  # its own temporary: not named
    assert str(exc.located("job.toml")) == str(exc)
    wrapped = RuntimeError("zarr says no")
    wrapped.__cause__ = OSError(errno.EACCES, os.strerror(errno.EACCES), "/elsewhere/x")
    assert str(OutputError.from_os("/r/a.zarr", wrapped, "the result")) == \
        f"cannot write the result /r/a.zarr: {os.strerror(errno.EACCES)} (at /elsewhere/x)"


def test_the_queue_fails_the_job_with_the_line_run_prints(tmp_path: Path, capsys) -> None:
    home = locate(tmp_path / "home")
    job = small_job(tmp_path, "nowhere", output=f"{PROC}/{{name}}.zarr")
    with Queue(home) as q:
        (j,) = submit(q, [job])
        c = q.claim("test").claim
    write_text_atomic(home.job_file(j.id), dumps(c.job_table))
    reply = child.execute({"job": j.id, "run": c.run_id, "attempt": 1, "output": c.output, "worker": "test"},
                          home, child.ChildState(os.getppid()))
    assert reply["status"] == "failed" and reply["kind"] == "os"
    assert main(["run", "-q", str(job)]) == 2
    assert one_line_error(capsys) == f"error: {reply['error']}"
    assert reply["error"].startswith(f"cannot write the result {PROC}/nowhere.zarr: No such file or directory")


# ---------------------------------------------------------------- --quiet
def test_quiet_prints_only_the_result_path(folder: Path, tmp_path: Path, capsys) -> None:
    job = str(folder / "job.toml")
    cases = [
        (["run", "-q", job, "-o", str(tmp_path / "q.zarr")], tmp_path / "q.zarr"),
        (["report", "--quiet", str(tmp_path / "q.zarr")], tmp_path / "q.report" / "index.html"),
        (["export", "-q", str(tmp_path / "q.zarr"), "--vti", str(tmp_path / "q.vti")], tmp_path / "q.vti"),
        (["converge", "-q", job, "--folder", str(tmp_path / "study")], tmp_path / "study"),
    ]
    for argv, path in cases:
        assert main(argv) == 0, argv
        got = capsys.readouterr()
        assert got.out == f"{path}\n" and got.err == "", (argv, got)
        assert path.exists()
    home = tmp_path / "home"
    assert main(["submit", "-q", str(small_job(tmp_path, "a")), str(small_job(tmp_path, "b")),
                 "--home", str(home)]) == 0
    assert capsys.readouterr().out == "1\n2\n"
    # errors still reach stderr, and nothing else is printed
    assert main(["run", "-q", job, "-o", f"{PROC}/q.zarr"]) == 2
    got = capsys.readouterr()
    assert got.out == "" and "cannot write the result" in got.err
