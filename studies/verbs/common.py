"""Options and output helpers shared by the verbs."""

from __future__ import annotations

import argparse
import json
import re
import sys
from typing import Any

__all__ = [
    "add_set_option",
    "add_json_option",
    "add_progress_option",
    "print_json",
    "is_touchstone_path",
    "dash",
    "format_number",
    "whole_number",
    "port_number",
]

_TOUCHSTONE = re.compile(r"\.s\d+p$", re.IGNORECASE)


def add_set_option(parser: argparse.ArgumentParser) -> None:
    """``--set section.key=value`` (repeatable) into ``args.set`` (a list, possibly empty)."""
    parser.add_argument(
        "--set", action="append", default=[], metavar="SECTION.KEY=VALUE",
        help="override a config value (a TOML value or a bare word), e.g. "
             "--set antenna.width_mm=2; repeatable",
    )


def add_json_option(parser: argparse.ArgumentParser) -> None:
    """``--json``: print one JSON object on stdout instead of the readable output."""
    parser.add_argument("--json", action="store_true",
                        help="print one JSON object on stdout instead of a table")


def add_progress_option(parser: argparse.ArgumentParser) -> None:
    """``--progress`` / ``--no-progress`` into ``args.progress`` (``None``: a bar only when
    stderr is a terminal)."""
    progress = parser.add_mutually_exclusive_group()
    progress.add_argument("--progress", dest="progress", action="store_true", default=None,
                          help="show the progress bar even when stderr is not a terminal")
    progress.add_argument("--no-progress", dest="progress", action="store_false",
                          help="no progress bar")


def print_json(obj: Any) -> None:
    """Print ``obj`` as one JSON object (no NaN or infinity: those must be ``None`` already)."""
    sys.stdout.write(json.dumps(obj, indent=2, allow_nan=False) + "\n")


def is_touchstone_path(path: str) -> bool:
    """Whether ``path`` names a Touchstone file by its ``.sNp`` suffix."""
    return bool(_TOUCHSTONE.search(str(path)))


def dash() -> str:
    """The mark of a missing value: an em dash where stdout can print one."""
    try:
        "\u2014".encode(sys.stdout.encoding or "ascii")
    except (UnicodeEncodeError, LookupError):
        return "-"
    return "\u2014"


def format_number(value: float) -> str:
    """A metric value for a table: five significant digits."""
    return f"{value:.5g}"


def whole_number(text: str, what: str = "a whole number", most: int | None = None) -> int:
    """argparse type: an integer >= 1, and <= ``most`` if given (``what`` names it)."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be {what} >= 1 (got {text!r})") from None
    if most is not None and not 1 <= value <= most:
        raise argparse.ArgumentTypeError(f"must be 1 to {most} (got {value})")
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be {what} >= 1 (got {value})")
    return value


def port_number(text: str) -> int:
    """argparse type: a port number >= 1."""
    return whole_number(text, "a port number")
