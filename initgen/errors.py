"""Exceptions that the command line turns into one-line messages and exit codes.

``InputError`` means the user gave us something we cannot use (recipe, layout, file,
argument). The CLI prints its message on one line and exits with status 2. Every message
names the file, variable or recipe key concerned and says what to do.
"""

from __future__ import annotations


class InputError(ValueError):
    """Bad input from the user: recipe, layout, netCDF file or argument (exit code 2).

    Parameters
    ----------
    *args
        The one-line message (as for :class:`ValueError`).
    key : str, optional
        The recipe or layout key concerned (``perturbations[0].region.shape``), when one is.
    variable, file : str, optional
        The netCDF variable or the file concerned, when one is.

    The message always names them too; the fields let a caller add context (a recipe key in
    front of an error from the science, which knows no recipe keys) without reading the text.
    """

    def __init__(self, *args, key: str | None = None, variable: str | None = None, file: str | None = None):
        super().__init__(*args)
        self.key, self.variable, self.file = key, variable, file


class InputWarning(UserWarning):
    """Something the user should know about the input, but that does not stop the run."""
