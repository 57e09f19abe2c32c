"""Exceptions of sevenfold, and the exit codes the command gives them. Every message is meant
to be shown to a user as it is."""

from __future__ import annotations

from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

# The ``sevenfold`` command's exit codes: a JobError (or another SevenfoldError) exits
# EXIT_INPUT, a SolverError or Cancelled EXIT_SOLVER, Ctrl-C EXIT_INTERRUPTED.
EXIT_OK, EXIT_SOLVER, EXIT_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130


class SevenfoldError(Exception):
    """Base class of every error sevenfold raises on purpose."""


class JobError(SevenfoldError):
    """A job file, or something it names, is unusable (CLI exit code 2).

    ``source`` is the job file, ``where`` the dotted key path inside it.
    """

    def __init__(self, reason: str, where: str = "", source: str = "") -> None:
        self.reason = reason
        self.where = where
        self.source = source
        super().__init__(reason)

    def located(self, source: str) -> "JobError":
        """The same error, naming the job file it came from."""
        return type(self)(self.reason, self.where, source)

    def __str__(self) -> str:
        parts = [p for p in (self.source, self.where) if p]
        return ": ".join(parts + [self.reason])


class OutputError(JobError):
    """An output cannot be written: the path and the operating system's reason (exit code 2).

    ``source`` is the output path; the message reads ``cannot write <what> <path>: <reason>``.
    """

    def __init__(self, reason: str, where: str = "", source: str = "") -> None:
        super().__init__(reason, where, "")  # the path is in the reason; no job file is added

    def located(self, source: str) -> "OutputError":
        return self

    @classmethod
    def from_os(cls, path: object, exc: BaseException, what: str = "") -> "OutputError":
        """From an OSError (or one it caused) met while writing ``path``."""
        os_exc = os_error(exc) or exc
        reason = getattr(os_exc, "strerror", None) or str(os_exc) or type(os_exc).__name__
        failed = getattr(os_exc, "filename", None)
        detail = ""
        blocker = file_in_the_way(Path(str(failed or path))) if isinstance(
            os_exc, (FileExistsError, NotADirectoryError)) else None
        if blocker is not None:  # what mkdir's "File exists" or "Not a directory" means here
            reason = f"{blocker} is a file, not a folder"
        elif failed and not _inside(Path(str(failed)), Path(str(path))):
            detail = f" (at {failed})"
        return cls(f"cannot write {what + ' ' if what else ''}{path}: {reason}{detail}")


def file_in_the_way(path: Path) -> Path | None:
    """The first of ``path`` and its parents that exists and is not a folder."""
    for p in (path, *path.parents):
        if p.exists():
            return None if p.is_dir() else p
    return None


def _inside(failed: Path, path: Path) -> bool:
    """``failed`` is ``path``, in it, or in one of its hidden temporary siblings (.<name>.*)."""
    for p in (failed, *failed.parents):
        if p == path or (p.parent == path.parent and p.name.startswith(f".{path.name}.")):
            return True
    return False


@contextmanager
def writing(path: object, what: str = "") -> Iterator[None]:
    """Turn an OSError met while writing ``path`` into an :class:`OutputError` (one line)."""
    try:
        yield
    except SevenfoldError:
        raise
    except Exception as exc:
        if os_error(exc) is None:
            raise
        raise OutputError.from_os(path, exc, what) from None


def os_error(exc: BaseException | None) -> OSError | None:
    """The OSError ``exc`` is or was caused by (libraries wrap them), or None."""
    seen = set()
    while exc is not None and id(exc) not in seen:
        if isinstance(exc, OSError):
            return exc
        seen.add(id(exc))
        exc = exc.__cause__ or exc.__context__
    return None


class SolverError(SevenfoldError):
    """A solve did not converge, stagnated or produced non-finite values (exit code 1).

    ``history`` keeps the relative residuals recorded up to the failure. When the solve
    stopped short with a usable iterate (maximum iterations, stagnation, the attainable-accuracy
    floor), ``partial`` is its :class:`~sevenfold.solvers.cg.SolveResult` (``converged`` False,
    ``x`` the last iterate); the solver layer adds ``field`` (that iterate on every cell) and
    the runner ``output`` (where it wrote the result marked ``converged = false``).
    """

    def __init__(self, reason: str, history: list[float] | None = None, partial: object = None) -> None:
        self.history = list(history or [])
        self.partial = partial
        self.field = None
        self.output = None
        super().__init__(reason)


class Cancelled(SevenfoldError):
    """A solve was asked to stop before it finished."""


class QueueError(SevenfoldError):
    """The queue cannot do what was asked: an unknown job id, a job in the wrong state, an
    unusable queue home or database (CLI exit code 2)."""
