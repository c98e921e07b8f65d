"""Exceptions the command line turns into one-line messages."""

__all__ = ["InputError", "ConvergenceWarning"]


class InputError(ValueError):
    """Unusable input file or options; the message is one line that names the fix."""


class ConvergenceWarning(UserWarning):
    """The sampler hit its step budget before the convergence criteria were met."""
