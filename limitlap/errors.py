"""The project's error types: one line for the user, a traceback only for bugs."""

from __future__ import annotations


class LimitlapError(Exception):
    """Base of every error the command line turns into a one-line message."""


class InputError(LimitlapError):
    """A user-supplied file or value is unusable.

    Parameters
    ----------
    path : str or os.PathLike
        The file (or option) at fault.
    problem : str
        What is wrong, in plain words.
    row, column : optional
        Where in the file; rows count as a spreadsheet shows them (header = row 1).
    """

    def __init__(self, path, problem, *, row=None, column=None):
        where = [str(path)] + ([f"row {row}"] if row is not None else [])
        where += [f"column '{column}'"] if column is not None else []
        self.path = str(path)
        self.problem = problem
        self.row = row
        self.column = column
        super().__init__(f"{', '.join(where)}: {problem}")


class LimitlapWarning(UserWarning):
    """Data usable, but a result is less certain than usual; shown to the user."""
