"""Exception types shared by the whole package.

Two kinds of failure reach a user:

* :class:`InputError` -- something the user gave is wrong (a value out of range, a misspelt key, a
  malformed file). It always names the field by its key path (``market.cost``) and says what was
  allowed and what was given. The command line prints it as one line and exits with status 2.
* :class:`SolverError` -- the input is valid but a numerical method failed to reach a certified
  answer (a best-response iteration that does not settle, for example). The command line prints it
  as one line and exits with status 1.
"""

from __future__ import annotations

__all__ = ["InputError", "SolverError", "SupergameError"]


class SupergameError(Exception):
    """Base class of every error this package raises on purpose."""


class InputError(SupergameError, ValueError):
    """A user-supplied value is invalid.

    Parameters
    ----------
    key : str
        Key path of the offending field, for example ``"market.cost"`` or ``"run.delta"``.
    message : str
        What is wrong: the allowed range or values and what was given.
    """

    def __init__(self, key: str, message: str):
        self.key = key
        self.message = message
        super().__init__(f"{key}: {message}" if key else message)

    def with_prefix(self, prefix: str) -> InputError:
        """The same error with ``prefix.`` prepended to its key path.

        Parameters
        ----------
        prefix : str

        Returns
        -------
        InputError
        """
        key = f"{prefix}.{self.key}" if self.key else prefix
        return InputError(key, self.message)


class SolverError(SupergameError, RuntimeError):
    """A numerical method failed to certify its answer."""


class Terminated(KeyboardInterrupt):
    """The process was asked to stop (SIGTERM, as batch schedulers and ``timeout`` send): handled like Ctrl-C --
    what finished is kept, the attempt is recorded as interrupted -- and the command exits with status 143."""
