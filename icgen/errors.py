"""The project's own error types.

Every problem with what a user gave (a parameter, a table, a path) is raised as an
:class:`InputError`, which the command line turns into one line of message and
exit status 2. ``InputError`` derives from ``ValueError`` so that library callers
can catch either.
"""

__all__ = ["InputError", "ParameterError", "TableError", "ModelError"]


class InputError(ValueError):
    """Bad input from the user: a parameter, a table, an output path."""


class ParameterError(InputError):
    """A parameter value, key or combination that is not allowed."""


class TableError(InputError):
    """A data table (power spectrum, transfer function) that cannot be used."""


class ModelError(InputError):
    """A cosmological model that the background solver refuses (e.g. no big bang)."""
