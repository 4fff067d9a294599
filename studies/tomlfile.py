"""Reading config files: TOML, ``--set`` overrides, and one-line error messages.

Nothing here is evaluated as code: the file is parsed with :mod:`tomllib` and an override value
is parsed as a TOML value (number, string, bool, array, inline table) or, when it is a bare word
that TOML cannot read, taken as a string.
"""

from __future__ import annotations

import difflib
import json
import re
import tomllib
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any

from pydantic import ValidationError

from sweeps.errors import ConfigError, read_input_bytes

__all__ = [
    "read_toml",
    "parse_override",
    "apply_overrides",
    "format_loc",
    "show_value",
    "suggest",
    "describe_validation_error",
    "error_text",
]

_BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")
_BARE_WORD = re.compile(r"^[A-Za-z_][A-Za-z0-9_.:/+-]*$")
_LOC_PIECE = re.compile(r"^[A-Za-z0-9_-]+(\[\d+\])*(\.[A-Za-z0-9_-]+(\[\d+\])*)*$")
_TOML_POS = re.compile(r"\s*\(at line (\d+), column (\d+)\)\s*$")


def read_toml(path: Path, label: str) -> dict[str, Any]:
    """Parse the TOML file ``path``; any problem is a :class:`ConfigError` starting ``label:``."""
    data = read_input_bytes(path, label, "a TOML file")
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise ConfigError(f"{label}: line {line}: not UTF-8 text") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        msg = str(exc)
        m = _TOML_POS.search(msg)
        if m:
            where = f"line {m.group(1)}, column {m.group(2)}"
            msg = msg[: m.start()]
        elif msg.endswith("(at end of document)"):
            where = "end of file"
            msg = msg[: -len("(at end of document)")].rstrip()
        else:
            where = "somewhere"
        raise ConfigError(f"{label}: {where}: invalid TOML: {msg}") from None


def parse_override(item: str) -> tuple[tuple[str, ...], Any]:
    """Split one ``section.key=value`` override into its key path and its TOML value.

    Parameters
    ----------
    item : str
        For example ``"antenna.width_mm=2"``, ``"switch.closed.r_ohm=30"``,
        ``"space.length_mm={min = 140, max = 160}"`` or ``"antenna.shape=meander"``; a whole
        section may be replaced by an inline table (``"sampler={method = 'lhs', points = 8}"``).

    Returns
    -------
    tuple
        The key path and the parsed value.

    Raises
    ------
    ConfigError
        No ``=``, an empty or non-bare key part, or a value TOML cannot read.
    """
    key, sep, raw = item.partition("=")
    key = key.strip()
    raw = raw.strip()
    if not sep or not key:
        raise ConfigError(f"--set {item!r}: expected section.key=value")
    parts = tuple(p.strip() for p in key.split("."))
    bad = [p for p in parts if not _BARE_KEY.match(p)]
    if bad:
        raise ConfigError(
            f"--set {key}: {bad[0]!r} is not a valid key (letters, digits, '_' and '-' only)"
        )
    if not raw:
        raise ConfigError(f"--set {key}: missing value after '='")
    try:
        value = tomllib.loads(f"v = {raw}")["v"]
    except tomllib.TOMLDecodeError:
        if _BARE_WORD.match(raw) and raw.lower() not in {"inf", "nan", "true", "false"}:
            value = raw  # a bare word such as meander or pec: a string
        else:
            raise ConfigError(
                f"--set {key}: {raw!r} is not a TOML value (a number, a quoted string, true or "
                "false, an array [..] or an inline table {..})"
            ) from None
    if len(parts) < 2 and not isinstance(value, dict):
        raise ConfigError(f"--set {key}: give a section and a key, e.g. antenna.{key}, or a "
                          f"whole section as an inline table, {key}={{...}}")
    return parts, value


def apply_overrides(
    raw: dict[str, Any], overrides: Sequence[str], label: str
) -> tuple[dict[str, Any], list[tuple[str, ...]]]:
    """Apply ``--set`` overrides to the parsed TOML ``raw`` (a new dict; ``raw`` is kept).

    Intermediate tables are created as needed; a path through a value that is not a table is
    an error naming it.

    Returns
    -------
    tuple
        The updated dict and the key paths that were set (to mark errors that come from them).
    """
    out = _deep_copy(raw)
    paths: list[tuple[str, ...]] = []
    for item in overrides:
        parts, value = parse_override(item)
        node: dict[str, Any] = out
        for depth, part in enumerate(parts[:-1]):
            nxt = node.get(part)
            if nxt is None:
                nxt = node[part] = {}
            elif not isinstance(nxt, dict):
                where = ".".join(parts[: depth + 1])
                raise ConfigError(
                    f"{label}: --set {'.'.join(parts)}: {where} is a value "
                    f"({show_value(nxt)}), not a table"
                )
            node = nxt
        node[parts[-1]] = value
        paths.append(parts)
    return out, paths


def _deep_copy(value: Any) -> Any:
    if isinstance(value, dict):
        return {k: _deep_copy(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_deep_copy(v) for v in value]
    return value


def format_loc(loc: Iterable[str | int]) -> str:
    """``("antenna", "wires", 0, "width_mm")`` → ``"antenna.wires[0].width_mm"``."""
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
            continue
        text = str(part)
        if not _BARE_KEY.match(text) and not _LOC_PIECE.match(text):
            text = json.dumps(text)  # a quoted key, as TOML would write it
        out += f".{text}" if out else text
    return out


def show_value(value: Any, limit: int = 60) -> str:
    """A value as the user wrote it, TOML style (strings quoted, true/false), shortened."""
    if isinstance(value, bool):
        text = "true" if value else "false"
    elif isinstance(value, (int, float)):
        text = repr(value)
    else:
        try:
            text = json.dumps(value, ensure_ascii=False, default=str)
        except (TypeError, ValueError):
            text = repr(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."


def suggest(word: str, choices: Iterable[str]) -> str:
    """``"; did you mean X?"`` for the closest choice, or the list of valid choices."""
    options = sorted(set(choices))
    close = difflib.get_close_matches(word, options, n=1, cutoff=0.6)
    if close:
        return f"; did you mean {close[0]}?"
    if options:
        return f"; expected one of: {', '.join(options)}"
    return ""


def _limit(v: Any) -> str:
    return f"{v:g}" if isinstance(v, float) else str(v)


def error_text(err: Mapping[str, Any]) -> tuple[list[str | int], str]:
    """Location and text of one pydantic error, in our words."""
    loc: list[str | int] = list(err.get("loc", ()))
    kind = err.get("type", "")
    ctx = err.get("ctx") or {}
    got = show_value(err.get("input"))
    if kind == "filamant":
        if ctx.get("key"):
            loc.append(ctx["key"])
        return loc, str(ctx.get("text", err.get("msg", "")))
    if kind == "unknown_key":
        key = str(ctx.get("key"))
        loc.append(key)
        known = str(ctx.get("known", "")).split(",")
        return loc, "unknown key" + suggest(key, [k for k in known if k])
    texts = {
        "missing": "required key missing",
        "greater_than": f"must be > {_limit(ctx.get('gt'))} (got {got})",
        "greater_than_equal": f"must be >= {_limit(ctx.get('ge'))} (got {got})",
        "less_than": f"must be < {_limit(ctx.get('lt'))} (got {got})",
        "less_than_equal": f"must be <= {_limit(ctx.get('le'))} (got {got})",
        "float_type": f"must be a number (got {got})",
        "int_type": f"must be a whole number (got {got})",
        "bool_type": f"must be true or false (got {got})",
        "string_type": f"must be a string (got {got})",
        "finite_number": f"must be a finite number (got {got})",
        "literal_error": f"must be one of {ctx.get('expected')} (got {got})",
        "model_type": f"must be a table (got {got})",
        "model_attributes_type": f"must be a table (got {got})",
        "dict_type": f"must be a table (got {got})",
        "list_type": f"must be an array (got {got})",
        "tuple_type": f"must be an array (got {got})",
        "too_short": f"needs at least {ctx.get('min_length')} entries (got {got})",
        "too_long": f"takes at most {ctx.get('max_length')} entries (got {got})",
    }
    if kind in texts:
        return loc, texts[kind]
    msg = str(err.get("msg", kind))
    if msg.startswith("Value error, "):
        msg = msg[len("Value error, "):]
    return loc, f"{msg} (got {got})"


def describe_validation_error(
    exc: ValidationError,
    label: str,
    prefix: Sequence[str | int] = (),
    overridden: Sequence[tuple[str, ...]] = (),
) -> str:
    """One line for a pydantic :class:`ValidationError`: ``label: key.path: what is wrong``.

    Only the first error is spelled out; the count of the others follows in brackets. A key that
    was set by ``--set`` is marked so.
    """
    errors = exc.errors(include_url=False)
    loc, text = error_text(errors[0])
    full = [*prefix, *loc]
    path = format_loc(full)
    names = tuple(str(p) for p in full if isinstance(p, str))
    if any(names[: len(o)] == o for o in overridden):
        path += " (from --set)"
    more = f" (and {len(errors) - 1} more problem{'s' if len(errors) > 2 else ''})"
    line = f"{label}: {path}: {text}" if path else f"{label}: {text}"
    return line + (more if len(errors) > 1 else "")
