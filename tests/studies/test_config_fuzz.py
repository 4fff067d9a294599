"""Property-based fuzzing of the config loader (hypothesis): whatever a file or an override
holds, the loader either returns a validated config or raises :class:`ConfigError` with one
line — never another exception.
"""

from __future__ import annotations

import json
import math
import os
import tomllib
from pathlib import Path
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from studies.config import SECTIONS, load_design, load_study, touchstone_options
from studies.constants import METRIC_NAMES, VARIABLE_KEYS
from sweeps.errors import ConfigError

EXAMPLE = Path(__file__).resolve().parents[2] / "studies" / "examples" / "drawer_study.toml"
# FILAMANT_FUZZ_EXAMPLES=5000 for a long hunt; the default keeps the suite fast.
FUZZ = settings(max_examples=int(os.environ.get("FILAMANT_FUZZ_EXAMPLES", "150")), deadline=None,
                suppress_health_check=[HealthCheck.too_slow])


# ------------------------------------------------------------------------ a small TOML writer


def _toml_str(value: str) -> str:
    """A TOML basic string: quote, backslash and control characters escaped (TOML 1.0)."""
    out = []
    for ch in value:
        if ch in '"\\':
            out.append("\\" + ch)
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04x}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def _toml_key(key: str) -> str:
    return _toml_str(key)  # a basic (quoted) key is always valid


def toml_value(value: Any) -> str:
    """One TOML value (inline form) for str/int/float/bool/list/dict."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return _toml_str(value)
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{_toml_key(k)} = {toml_value(v)}" for k, v in value.items()) + "}"
    raise TypeError(type(value))


def dumps(doc: dict[str, Any]) -> str:
    """A document as one ``key = value`` line per top-level key (tables inline)."""
    return "".join(f"{_toml_key(k)} = {toml_value(v)}\n" for k, v in doc.items())


# ----------------------------------------------------------------------------- strategies

KEYS = sorted({*SECTIONS, *[k for keys in VARIABLE_KEYS.values() for k in keys], "shape",
               "min", "max", "log", "steps", "method", "points", "seed", "closed", "open",
               "start_mhz", "stop_mhz", "target_mhz", "trials", "objectives", "metric",
               "goal", "workers", "scheduler", "jobqueue", "targets", "model", "name", "store",
               "wires", "points_mm", "feed_point_mm"})
WORDS = ["dipole", "meander", "loop", "wires", "folded", "pec", "grid", "sobol", "lhs",
         "optimize", "max", "min", "tpe", *METRIC_NAMES[:4], "tcp://127.0.0.1:8786"]

text = st.text(st.characters(blacklist_categories=("Cs",)), max_size=12)
scalars = st.one_of(
    st.booleans(),
    st.integers(min_value=-(2 ** 63), max_value=2 ** 63 - 1),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from(WORDS),
    text,
)
keys = st.one_of(st.sampled_from(KEYS), text)
values = st.recursive(
    scalars,
    lambda inner: st.one_of(st.lists(inner, max_size=4),
                            st.dictionaries(keys, inner, max_size=4)),
    max_leaves=12,
)
documents = st.dictionaries(keys, values, max_size=8)


@pytest.fixture(scope="module")
def fuzz_dir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return tmp_path_factory.mktemp("fuzz")


def check_only_config_errors(path: Path, overrides: list[str] = ()) -> None:
    for loader in (load_study, load_design):
        try:
            result = loader(path, overrides)
        except ConfigError as exc:
            assert "\n" not in str(exc) and str(exc)
        else:
            json.dumps(result.canonical(), allow_nan=False)


@FUZZ
@given(doc=documents)
def test_writer_round_trips(doc):
    """The test's own TOML writer is checked against tomllib before it is trusted."""
    back = tomllib.loads(dumps(doc))
    assert json.dumps(back, sort_keys=True, default=str) == json.dumps(
        doc, sort_keys=True, default=str) or any(
        isinstance(v, float) and math.isnan(v) for v in _leaves(doc))


def _leaves(value: Any):
    if isinstance(value, dict):
        for v in value.values():
            yield from _leaves(v)
    elif isinstance(value, list):
        for v in value:
            yield from _leaves(v)
    else:
        yield value


@FUZZ
@given(doc=documents)
def test_random_documents_raise_only_config_errors(fuzz_dir, doc):
    path = fuzz_dir / "random.toml"
    path.write_text(dumps(doc))
    check_only_config_errors(path)


@FUZZ
@given(data=st.binary(max_size=200) | text.map(str.encode))
def test_random_bytes_raise_only_config_errors(fuzz_dir, data):
    path = fuzz_dir / "bytes.toml"
    path.write_bytes(data)
    check_only_config_errors(path)


def _paths(doc: dict[str, Any], prefix: tuple[str, ...] = ()) -> list[tuple[str, ...]]:
    out = []
    for k, v in doc.items():
        out.append((*prefix, k))
        if isinstance(v, dict):
            out += _paths(v, (*prefix, k))
    return out


EXAMPLE_DOC = tomllib.loads(EXAMPLE.read_text())
EXAMPLE_PATHS = _paths(EXAMPLE_DOC)


@FUZZ
@given(edits=st.lists(st.tuples(st.sampled_from(EXAMPLE_PATHS), values), min_size=1,
                      max_size=3))
def test_mutated_example_raises_only_config_errors(fuzz_dir, edits):
    """Deep mutations of a valid study reach every section's validators."""
    doc = json.loads(json.dumps(EXAMPLE_DOC))
    for path, value in edits:
        node = doc
        for part in path[:-1]:
            if not isinstance(node.get(part), dict):
                break
            node = node[part]
        else:
            node[path[-1]] = value
    target = fuzz_dir / "mutated.toml"
    target.write_text(dumps(doc))
    check_only_config_errors(target)


@FUZZ
@given(items=st.lists(st.one_of(
    text,
    st.tuples(st.sampled_from([".".join(p) for p in EXAMPLE_PATHS]), values).map(
        lambda kv: f"{kv[0]}={toml_value(kv[1])}"),
    st.tuples(st.sampled_from([".".join(p) for p in EXAMPLE_PATHS]), text).map(
        lambda kv: f"{kv[0]}={kv[1]}"),
), max_size=3))
def test_random_overrides_raise_only_config_errors(items):
    check_only_config_errors(EXAMPLE, items)


@FUZZ
@given(items=st.lists(st.tuples(
    st.sampled_from(["switch.closed.r_ohm", "switch.open.c_pf", "switch.open", "reader.x",
                     "reader.tx_power_dbm", "feed.z0_ohm", "band.target_mhz", "antenna.shape",
                     "band.points"]),
    values).map(lambda kv: f"{kv[0]}={toml_value(kv[1])}"), max_size=3),
    target=st.none() | st.floats())
def test_touchstone_options_raise_only_config_errors(items, target):
    try:
        opts = touchstone_options(items, target_mhz=target)
    except ConfigError as exc:
        assert "\n" not in str(exc)
    else:
        assert opts.target_mhz is None or (math.isfinite(opts.target_mhz)
                                           and opts.target_mhz > 0)
