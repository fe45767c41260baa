"""Exceptions raised for bad user input.

Every error a user can cause carries enough context to be reported as one
line (file, row, column, what is wrong); the command line prints that line
and exits with status 2 instead of showing a traceback.
"""

__all__ = ["DeepwellError", "InputError", "SettingsError", "OutputError", "OptionError"]


class DeepwellError(Exception):
    """Base class of all errors deepwell reports to a user."""


class InputError(DeepwellError, ValueError):
    """A problem in an input table.

    Parameters
    ----------
    message : str
        What is wrong, e.g. ``"not a number: 'abc'"``.
    file : str, optional
        File name as the user gave it.
    row : int, optional
        Line number in the file (the header is line 1).
    column : str, optional
        Column name.
    """

    _WHERE = "column"

    def __init__(self, message, file=None, row=None, column=None):
        self.message = message
        self.file = None if file is None else str(file)
        self.row = row
        self.column = column
        super().__init__(self.__str__())

    def __str__(self):
        where = []
        if self.file is not None:
            where.append(self.file)
        if self.row is not None:
            where.append(f"line {self.row}")
        if self.column is not None:
            where.append(f"{self._WHERE} '{self.column}'")
        prefix = ", ".join(where)
        return f"{prefix}: {self.message}" if prefix else self.message


class SettingsError(InputError):
    """A problem in the TOML settings file or a scenario description.

    ``column`` holds the dotted TOML key (e.g. ``shared.mass.min``); it is
    shown as ``key '...'``.
    """

    _WHERE = "key"


class OutputError(DeepwellError):
    """The report folder cannot be written safely (e.g. it holds foreign files)."""


class OptionError(DeepwellError, ValueError):
    """A command-line option that cannot be used as given.

    Parameters
    ----------
    option : str
        The option as typed, e.g. ``"--max-time"``.
    message : str
        What is wrong.
    """

    def __init__(self, option, message):
        self.option, self.message = option, message
        super().__init__(f"option {option}: {message}")
