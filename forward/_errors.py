"""Errors that reach the user as one clear line.

An :class:`InputError` is a problem with something the user gave us (a run file, a spectrum,
a series file, a command-line option).  The command-line front end prints ``str(error)`` on one
line and exits with code 2; it never shows a traceback for these.

An :class:`InputWarning` is an input that can be read but looks like a slip (a charge that
would be right in coulombs, counts that are not whole numbers).  Its message has the same
``<where>: <what looks wrong>; <what happens>`` form, on one line; the command line prints it
as ``sondage: warning: ...`` and carries on.
"""

from __future__ import annotations

__all__ = ["InputError", "InputWarning"]


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


class InputWarning(UserWarning):
    """An input that is read as given but looks like a slip; the message names file and key."""


def warn_input(message: str, where: str | None = None, category=InputWarning,
               stacklevel: int = 2) -> None:
    """Issue a one-line warning ``<where>: <message>`` (the form of :class:`InputError`).

    Parameters
    ----------
    message : str
        What looks wrong and what is done with it.
    where : str, optional
        The file, and inside it the key or line.
    category : type, default InputWarning
        The warning class.
    stacklevel : int, default 2
        As for :func:`warnings.warn`, counted from the caller of this function.
    """
    import warnings

    text = f"{where}: {message}" if where else message
    warnings.warn(" ".join(text.split()), category, stacklevel=stacklevel + 1)
