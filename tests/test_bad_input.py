"""Bad job files end with exit code 2 and one line naming the file, the key path and the reason."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from conftest import BAD_JOBS, bad_job_corpus

from sevenfold.cli import main
from sevenfold.errors import JobError
from sevenfold.expressions import ExpressionError, check_expression
from sevenfold.problem import build_problem
from sevenfold.spec import parse_job

CORPUS = BAD_JOBS
CASES = sorted(CORPUS.glob("*.toml"))


def expected_message(path: Path) -> str:
    first = path.read_bytes().split(b"\n", 1)[0].decode()
    assert first.startswith("# expect: "), f"{path.name} lacks its '# expect:' line"
    return first[len("# expect: "):]


@pytest.fixture
def corpus(tmp_path: Path) -> Path:
    return bad_job_corpus(tmp_path)


@pytest.mark.parametrize("case", CASES, ids=lambda p: p.stem)
def test_bad_job_exits_2_with_its_message(case: Path, corpus: Path, capsys) -> None:
    path = corpus / case.name
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    one_line = " ".join(err.split())
    assert str(path) in one_line
    assert expected_message(case) in one_line


def test_run_refuses_the_same_way(corpus: Path, capsys) -> None:
    path = corpus / "negative-expression-coefficient.toml"
    assert main(["run", str(path)]) == 2
    assert "must be positive everywhere" in capsys.readouterr().err
    assert not (corpus / "results").exists() or not any((corpus / "results").iterdir())


def test_a_whole_process_shows_no_traceback(corpus: Path) -> None:
    """The installed console entry point, as a user meets it."""
    for name in ("syntax-error.toml", "expression-calls-import.toml", "misshaped-file.toml"):
        proc = subprocess.run(
            [sys.executable, "-m", "sevenfold.cli", "check", str(corpus / name)],
            capture_output=True, text=True, timeout=120,
        )
        assert proc.returncode == 2, proc.stderr
        assert "Traceback" not in proc.stderr
        assert len(proc.stderr.strip().splitlines()) <= 3  # one logical line, wrapped at most


def test_missing_job_file(tmp_path: Path, capsys) -> None:
    assert main(["check", str(tmp_path / "absent.toml")]) == 2
    assert "job file not found" in capsys.readouterr().err


@pytest.mark.parametrize(
    "text",
    ["__import__('os')", "x.real", "open('f')", "'a' * 3", "x[0]", "lambda: 1", "(x for x in y)",
     "sin(x, out=y)", "globals()", "exec('1')", "().__class__", "True", "{1: 2}"],
)
def test_expressions_refuse_anything_but_arithmetic(text: str) -> None:
    with pytest.raises(ExpressionError):
        check_expression(text)


# ------------------------------------------------------------------ generated job tables
_numbers = st.one_of(
    st.integers(-5, 40), st.floats(allow_nan=True, allow_infinity=True), st.just(0), st.just(1e300)
)
_leaf = st.one_of(_numbers, st.text(max_size=12), st.booleans(), st.none().map(lambda _: "x*y+z"),
                  st.lists(_numbers, max_size=4))
_vec = st.lists(st.one_of(st.integers(-3, 12), st.floats(-2, 2)), min_size=0, max_size=4)
_shape = st.one_of(
    st.fixed_dictionaries({"box": st.fixed_dictionaries({"min": _vec, "max": _vec})}),
    st.fixed_dictionaries({"sphere": st.fixed_dictionaries({"center": _vec, "radius": _numbers})}),
    st.fixed_dictionaries({"cylinder": st.fixed_dictionaries(
        {"center": _vec, "radius": _numbers, "axis": st.sampled_from(["x", "y", "z", "w"]), "length": _numbers})}),
    st.dictionaries(st.text(max_size=6), _leaf, max_size=2),
)
_face = st.one_of(
    st.fixed_dictionaries({"type": st.sampled_from(["dirichlet", "neumann", "robin", "other"])},
                          optional={"value": _leaf, "flux": _leaf, "coefficient": _leaf, "reference": _leaf}),
    _leaf,
)
_table = st.fixed_dictionaries(
    {},
    optional={
        "name": st.one_of(st.text(max_size=10), _leaf),
        "physics": st.sampled_from(["heat", "electrostatics", "groundwater", "generic", "light"]),
        "grid": st.fixed_dictionaries({}, optional={
            "cells": st.lists(st.integers(-1, 6), min_size=2, max_size=4), "size": _vec, "spacing": _vec,
            "origin": _vec, "extra": _leaf}),
        "material": st.fixed_dictionaries({}, optional={
            "value": _leaf, "expression": _leaf, "file": st.text(max_size=8),
            "region": st.lists(st.one_of(_shape, _shape.map(lambda d: {**d, "value": 2.0})), max_size=2)}),
        "source": st.fixed_dictionaries({}, optional={
            "value": _leaf, "region": st.lists(_shape.map(lambda d: {**d, "total": 1.0}), max_size=2)}),
        "boundary": st.dictionaries(st.sampled_from(["x_min", "x_max", "y_min", "z_max", "q_min"]), _face, max_size=3),
        "hold": st.lists(_shape.map(lambda d: {**d, "value": 1.0}), max_size=2),
        "solver": st.dictionaries(st.sampled_from(["method", "rtol", "max_iterations", "amg", "nope"]), _leaf, max_size=2),
    },
)


@settings(max_examples=300, deadline=None)
@given(_table)
def test_generated_tables_raise_only_job_errors(table: dict) -> None:
    """Whatever the table holds, validation and discretisation end in a spec or a JobError."""
    try:
        spec = parse_job(table, "generated.toml")
    except JobError as exc:
        assert str(exc).startswith("generated.toml")
        return
    if spec.material.file is None and spec.source.file is None:
        try:
            build_problem(spec)
        except JobError:
            pass
