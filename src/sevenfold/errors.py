"""Exceptions of sevenfold. Every message is meant to be shown to a user as it is."""

from __future__ import annotations


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
