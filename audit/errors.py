"""Errors that carry a message meant for the user, not a traceback."""
from __future__ import annotations


class InputError(ValueError):
    """Bad user input: a scenario, data file, model module or command-line value.

    The message is one line that names the file and the key, column or row at fault. The
    command-line interface prints it and exits with status 2.
    """
