"""One exception tree for filamant.

Every message says the rule, the value received and, where there is one, the remedy, in the
style ``"<where>: <what is wrong> (got <value>); <remedy>"``. The command line turns any
:class:`FilamantError` into one line on stderr and exit status 2.
"""

from __future__ import annotations

__all__ = [
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
