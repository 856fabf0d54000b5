"""The one base class of every problem with what the user gave: a board, a limit, a file, an option.

Each subclass carries the file, the key (or line) and what is allowed; the command line turns any of them into a
one-line message and exit status 2.  This module imports nothing, so the command line can catch them without
loading the models.
"""

__all__ = ["InputError"]


class InputError(ValueError):
    """Bad input: the message names where (file and key) and what is allowed."""
