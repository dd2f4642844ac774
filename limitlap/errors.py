"""The project's error types: one line for the user, a traceback only for bugs.

Messages carry facts, not a front end's words: an error about a value given for a
parameter names the parameter as the Python call spells it (:class:`ArgumentError`), and
a warning whose advice is "give this parameter" keeps that advice as a hint kind
(:class:`WarningLine`). The command line words both with its own option names.
"""

from __future__ import annotations


class LimitlapError(Exception):
    """Base of every error the command line turns into a one-line message."""


class InputError(LimitlapError):
    """A user-supplied file or value is unusable.

    Parameters
    ----------
    path : str or os.PathLike
        The file (or parameter) at fault.
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


class ArgumentError(InputError):
    """A value given for one of the call's parameters is unusable.

    The message is ``"<argument>: <problem>"``; a front end with its own name for the
    parameter words it from :attr:`argument` and :attr:`problem`.

    Parameters
    ----------
    argument : str
        The parameter as the Python call names it, e.g. ``"gate"``.
    problem : str
        What is wrong with the value, in plain words.
    """

    def __init__(self, argument: str, problem: str):
        super().__init__(argument, problem)
        self.argument = argument


class ExtraNeeded(LimitlapError):
    """A parameter asks for an optional part of limitlap that is not installed.

    Parameters
    ----------
    argument : str
        The parameter as the Python call names it, e.g. ``"scheduler"``.
    library : str
        The library it needs, e.g. ``"Dask"``.
    extra : str
        The package extra that installs it, e.g. ``"dask"``.
    """

    def __init__(self, argument: str, library: str, extra: str):
        self.argument = argument
        self.library = library
        self.extra = extra
        super().__init__(f"{argument} needs {library}: pip install 'limitlap[{extra}]'")


#: How the Python API words each hint kind of a :class:`WarningLine` after its fact
#: (``{value}`` is the warning's value). A front end words them with its own names.
HINTS = {
    "gate": " (give the start/finish gate as LAT,LON for lap times from the real line)",
    "grip_scale": "; analyse at grip scale {value:.2f} for the ideal at the grip found",
    "check_units": "; fix the unit (header or channel map), or analyse with "
    "check_units=False to go on",
}


class UnitMismatch(InputError):
    """Channels of a log that disagree with its GNSS path (a wrong unit or sign).

    Parameters
    ----------
    path : str or os.PathLike
        The log.
    findings : list of limitlap.unit_checks.UnitFinding
        What disagrees, each with the factor found. [-]
    """

    hint = "check_units"

    def __init__(self, path, findings):
        self.findings = list(findings)
        self.fact = "; ".join(str(f) for f in self.findings)
        super().__init__(path, self.fact + HINTS[self.hint])


class WarningLine(str):
    """One warning line; with a hint, its advice is a fact for the front end to word.

    The string is the line as the Python API words it: :attr:`fact`, then the advice of
    :data:`HINTS` for :attr:`hint`, if any.

    Parameters
    ----------
    fact : str
        What was found, naming the file where there is one.
    hint : str, optional
        What to give to do better, as the parameter of
        :func:`limitlap.pipeline.analyse` that takes it: ``"gate"`` or ``"grip_scale"``.
    value : float, optional
        The value the advice suggests, in the parameter's unit; [-] for a grip scale.
    """

    fact: str
    hint: str | None
    value: float | None

    def __new__(cls, fact: str, hint: str | None = None, value: float | None = None):
        """The fact, with the library's own advice for ``hint`` appended."""
        text = fact if hint is None else fact + HINTS[hint].format(value=value)
        line = super().__new__(cls, text)
        line.fact, line.hint, line.value = fact, hint, value
        return line


class LimitlapWarning(UserWarning):
    """Data usable, but a result is less certain than usual; shown to the user."""
