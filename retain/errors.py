"""Typed errors. Library code raises these; only the CLI turns them into one line.

Every error says *where* (file, column, key, customer), *which rule* was broken,
and *what to do*.
"""

from __future__ import annotations


class RetainError(Exception):
    """Base of every error ``retain`` raises on purpose."""

    def __init__(self, where: str, rule: str, fix: str = "") -> None:
        self.where = where
        self.rule = rule
        self.fix = fix
        super().__init__(self.message)

    @property
    def message(self) -> str:
        text = f"{self.where}: {self.rule}"
        if self.fix:
            text += f" -- {self.fix}"
        return text

    def __str__(self) -> str:  # pragma: no cover - trivial
        return self.message


class ConfigError(RetainError):
    """retain.toml is missing, malformed, or names something that is not there."""


class DataError(RetainError):
    """Input data break the event-log or start-stop contract."""


class ModelError(RetainError):
    """A model cannot be fitted as asked (no events, separation, singular information)."""


class ConvergenceError(ModelError):
    """An iterative fit did not converge; ``history`` holds the iteration log."""

    def __init__(self, where: str, rule: str, fix: str = "", history: list | None = None) -> None:
        self.history = list(history or [])
        super().__init__(where, rule, fix)


class ReconciliationError(RetainError):
    """Rows in != rows used + rows quarantined: always a bug in retain."""


class BuildError(RetainError):
    """The site could not be built; the previous site is left untouched."""


def internal_error_text(exc: BaseException) -> str:
    """One line for an exception that is a bug in retain (not a :class:`RetainError`):
    its type, message and the place it was raised, and a request to report it."""
    import traceback

    tb = traceback.extract_tb(exc.__traceback__)
    at = f" (at {tb[-1].name}, {tb[-1].filename.rsplit('/', 1)[-1]}:{tb[-1].lineno})" \
        if tb else ""
    return (f"internal error {type(exc).__name__}: {exc}{at} -- this is a bug in retain; "
            "please report it")
