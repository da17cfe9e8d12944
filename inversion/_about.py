"""The program's name and version, as the command line prints them and the files record them."""

from __future__ import annotations

import importlib.metadata

__all__ = ["PROGRAM", "version"]

PROGRAM = "sondage"


def version(default: str = "0+unknown") -> str:
    """The installed version of sondage, or ``default`` when running from a bare checkout."""
    try:
        return importlib.metadata.version("sondage")
    except importlib.metadata.PackageNotFoundError:
        return default
