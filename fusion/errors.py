"""Exceptions of the project.

Every error a user can cause derives from :class:`FusionError`; the CLI turns
it into one line and exit code 1. Anything else is a bug and shows a traceback
only with ``--debug``.
"""

from __future__ import annotations

__all__ = ["FusionError", "ConfigError", "InputError", "ArgumentError"]


class FusionError(Exception):
    """Base class of the errors a user can cause (bad config, bad input)."""


class ConfigError(FusionError, ValueError):
    """A config key holds a value the schema refuses.

    Parameters
    ----------
    key : str
        Dotted key path, e.g. ``"laminate.ply_thickness"`` or ``"run 'CX-2Hz'.thermal.frames"``.
    message : str
        What was expected, and where possible how to fix it.
    source : str, optional
        The config file, named in the message when given.
    """

    def __init__(self, key: str, message: str, *, source: str | None = None):
        self.key = key
        self.message = message
        self.source = source
        where = f"{source}: " if source else ""
        super().__init__(f"{where}{key}: {message}")


class InputError(FusionError, ValueError):
    """An input file is missing, unreadable or not what the config says.

    Parameters
    ----------
    path : str or os.PathLike
        The offending file, always named in the message.
    message : str
        What was wrong and what was expected.
    """

    def __init__(self, path, message: str):
        self.path = str(path)
        self.message = message
        super().__init__(f"{self.path}: {message}")


class ArgumentError(FusionError, ValueError):
    """A value passed to a public function is outside what the argument can mean.

    Raised at the door of the Python API where a value reads without error but would
    give a confident, wrong answer (a length in millimetres where metres are expected,
    strains in microstrain, an image axis order swapped).

    Parameters
    ----------
    parameter : str
        The argument's name, always named in the message.
    message : str
        What the value looks like and how to fix it.
    """

    def __init__(self, parameter: str, message: str):
        self.parameter = parameter
        self.message = message
        super().__init__(f"{parameter}: {message}")
