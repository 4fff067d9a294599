"""One exception tree for filamant.

Every message says the rule, the value received and, where there is one, the remedy, in the
style ``"<where>: <what is wrong> (got <value>); <remedy>"``. The command line turns any
:class:`FilamantError` into one line on stderr and exit status 2.
"""

from __future__ import annotations

from pathlib import Path

__all__ = [
    "read_input_bytes",
    "ConfigError",
    "FilamantError",
    "GeometryError",
    "SolverError",
    "StoreError",
    "TouchstoneError",
]


class FilamantError(Exception):
    """Base class of every error filamant raises on purpose (bad input, refused action)."""


class GeometryError(FilamantError, ValueError):
    """A wire structure that the thin-wire model cannot represent faithfully."""


class SolverError(FilamantError, RuntimeError):
    """The method-of-moments solve failed (singular matrix, non-finite result)."""


class ConfigError(FilamantError, ValueError):
    """A study or design configuration that breaks the schema or a range rule."""


class StoreError(FilamantError, RuntimeError):
    """The study store refused an action (changed plan, concurrent run, corrupt data)."""


class TouchstoneError(FilamantError, ValueError):
    """A Touchstone file that is malformed or does not fit the request."""


def read_input_bytes(path: Path, label: str, what: str,
                     error: type[FilamantError] = ConfigError) -> bytes:
    """The bytes of the input file ``path``; a missing or unreadable file raises ``error``.

    Parameters
    ----------
    path : Path
    label : str
        Where the message starts (usually the path as the user gave it).
    what : str
        The kind of file expected, for the message ("a TOML file", "a Touchstone file").
    error : type
        The :class:`FilamantError` subclass to raise.
    """
    try:
        return path.read_bytes()
    except FileNotFoundError:
        raise error(f"{label}: no such file") from None
    except IsADirectoryError:
        raise error(f"{label}: is a directory, not {what}") from None
    except OSError as exc:
        raise error(f"{label}: cannot read ({exc.strerror or exc})") from None
