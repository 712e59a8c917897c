"""Exceptions raised by the estimator library.

Libraries raise; the command line and the service catch at one place and turn
these into an exit code or an HTTP status.
"""

from __future__ import annotations

__all__ = ["ConvergenceError", "EstimatorError", "InputError"]


class EstimatorError(Exception):
    """Base class of every error the estimator raises on purpose."""


class InputError(EstimatorError):
    """The user's input cannot be analysed as given.

    Parameters
    ----------
    message
        What is wrong, what was expected and how to fix it.
    source
        The file or option the problem was found in (``"strain.txt"``,
        ``"--trigger-time"``), or ``None``.
    where
        The place inside the source (``"line 812"``, ``"column 2"``), or ``None``.
    field
        The name of the setting or upload field the error belongs to
        (``"strain"``, ``"psd"``, ``"trigger_time"``...), so that a form can show
        the message beside that field.
    """

    def __init__(
        self,
        message: str,
        *,
        source: str | None = None,
        where: str | None = None,
        field: str | None = None,
    ) -> None:
        self.message = message
        self.source = source
        self.where = where
        self.field = field
        prefix = ""
        if source is not None:
            prefix = source + (f" {where}" if where else "") + ": "
        elif where is not None:
            prefix = where + ": "
        super().__init__(prefix + message)


class ConvergenceError(EstimatorError):
    """The sampler did not converge within its step cap.

    Carries the partial autocorrelation estimate so the caller can report it.
    """

    def __init__(self, message: str, *, tau: object = None, steps: int = 0) -> None:
        self.tau = tau
        self.steps = steps
        super().__init__(message)
