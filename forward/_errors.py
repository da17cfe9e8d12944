"""Errors that reach the user as one clear line.

An :class:`InputError` is a problem with something the user gave us (a run file, a spectrum,
a series file, a command-line option).  The command-line front end prints ``str(error)`` on one
line and exits with code 2; it never shows a traceback for these.
"""

from __future__ import annotations

__all__ = ["InputError"]


class InputError(ValueError):
    """A bad input, reported as ``<where>: <what is wrong>; <what is allowed>``.

    Parameters
    ----------
    message : str
        What is wrong and what is allowed.
    where : str, optional
        The file, and inside it the key or line, e.g. ``"run.toml: sample.layers[1].density"``.
    """

    def __init__(self, message: str, where: str | None = None):
        self.where = where
        self.message = message
        text = f"{where}: {message}" if where else message
        # One line, always: the CLI prints this verbatim.
        super().__init__(" ".join(text.split()))
