"""Exceptions that the command line turns into one-line messages and exit codes.

``InputError`` means the user gave us something we cannot use (recipe, layout, file,
argument). The CLI prints its message on one line and exits with status 2. Every message
names the file, variable or recipe key concerned and says what to do.
"""


class InputError(ValueError):
    """Bad input from the user: recipe, layout, netCDF file or argument (exit code 2)."""


class InputWarning(UserWarning):
    """Something the user should know about the input, but that does not stop the run."""
