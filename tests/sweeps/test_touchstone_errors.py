"""Malformed Touchstone files: one clear line naming the file and the line, nothing else.

Rules from the Touchstone File Format Specification 2.0 (IBIS Open Forum, 2009): one option
line ``# <unit> <parameter> <format> R <n>`` before the data; strictly increasing frequencies;
a version-1 file takes its port count from the ``.sNp`` extension; a version-2 file starts with
``[Version]`` and declares ``[Number of Ports]``, ``[Number of Frequencies]``, ``[Two-Port Data
Order]`` (two ports), ``[Network Data]`` and ``[End]``.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from sweeps.errors import TouchstoneError
from sweeps.metrics import MetricSet
from sweeps.touchstone import evaluate_touchstone, read_touchstone

V2_HEAD = ("[Version] 2.0\n# MHz S RI R 50\n[Number of Ports] 2\n[Two-Port Data Order] 12_21\n"
           "[Number of Frequencies] 2\n[Network Data]\n")
ROW2 = "0.1 0.2 0.3 0.4 0.3 0.4 0.5 0.6"

CASES = [
    # (id, file name, content, line, words in the message)
    ("empty", "a.s1p", "", 1, "empty"),
    ("only-comments", "a.s1p", "! nothing\n!\n   \n", 1, "empty"),
    ("no-data", "a.s1p", "! c\n# MHz S RI R 50\n", 2, "no network data"),
    ("truncated-1port", "a.s1p", "# MHz S RI R 50\n900 0.1 0.2\n910 0.1\n920 0.1 0.2\n", 3,
     "truncated data row"),
    ("truncated-2port", "a.s2p", f"# MHz S RI R 50\n900 {ROW2}\n910 {ROW2[:-8]}\n", 3,
     "truncated data row"),
    ("truncated-3port-row", "a.s3p",
     "# MHz S RI R 50\n900 1 2 3 4 5 6\n 1 2 3 4 5\n 1 2 3 4 5 6\n910 1 2 3 4 5 6\n", 3,
     "row 2 of the data for frequency 900 has 5 of 6"),
    ("truncated-3port-eof", "a.s3p", "# MHz S RI R 50\n900 1 2 3 4 5 6\n 1 2 3 4 5 6\n", 3,
     "row 3"),
    ("too-many-values", "a.s1p", "# MHz S RI R 50\n900 0.1 0.2 0.3\n", 2, "too many values"),
    ("non-numeric", "a.s1p", "# MHz S RI R 50\n900 0.1 0.2\n910 0.1 abc\n", 3,
     "non-numeric value 'abc'"),
    ("nan", "a.s1p", "# MHz S RI R 50\n900 0.1 nan\n", 2, "non-numeric value 'nan'"),
    ("comma", "a.s1p", "# MHz S RI R 50\n900 0.1,0.2 0.3\n", 2, "non-numeric"),
    ("2port-data-in-s1p", "tag.s1p", f"# MHz S RI R 50\n900 {ROW2}\n", 2,
     "layout of 2-port data, but the extension .s1p says 1 port"),
    ("1port-data-in-s2p", "tag.s2p", "# MHz S RI R 50\n900 0.1 0.2\n", 2,
     "layout of 1-port data, but the extension .s2p says 2 port"),
    ("decreasing", "a.s1p", "# MHz S RI R 50\n900 0.1 0.2\n910 0.1 0.2\n905 0.1 0.2\n", 4,
     "frequencies must increase: 905 after 910 (line 3)"),
    ("repeated", "a.s1p", "# MHz S RI R 50\n900 0.1 0.2\n900 0.1 0.2\n", 3,
     "frequencies must increase"),
    ("negative-frequency", "a.s1p", "# MHz S RI R 50\n-900 0.1 0.2\n", 2, "negative"),
    ("unknown-option", "a.s1p", "! x\n# MHz S XY R 50\n900 0.1 0.2\n", 2, "unknown option 'XY'"),
    ("option-r-missing", "a.s1p", "# MHz S RI R\n900 0.1 0.2\n", 1, "followed by the reference"),
    ("option-r-negative", "a.s1p", "# MHz S RI R -5\n900 0.1 0.2\n", 1, "must be > 0"),
    ("option-twice", "a.s1p", "# MHz S RI R 50\n# GHz S RI R 50\n900 0.1 0.2\n", 2,
     "second option line"),
    ("option-unit-twice", "a.s1p", "# MHz GHz S RI\n900 0.1 0.2\n", 1, "unit twice"),
    ("option-after-data", "a.s1p", "900 0.1 0.2\n# MHz S RI R 50\n", 2, "before the data"),
    ("h-parameters", "a.s2p", f"# MHz H RI R 50\n900 {ROW2}\n", 1, "not supported"),
    ("v1-keyword", "a.s1p", "# MHz S RI R 50\n[Number of Ports] 1\n900 0.1 0.2\n", 2,
     "without [Version]"),
    ("v2-version-bad", "a.ts", "[Version] 3.0\n", 1, "unsupported [Version]"),
    ("v2-version-not-first", "a.s1p", "# MHz S RI R 50\n[Version] 2.0\n", 2, "first line"),
    ("v2-unknown-keyword", "a.ts", "[Version] 2.0\n# MHz S RI R 50\n[Colour] blue\n", 3,
     "unknown keyword [Colour]"),
    ("v2-ports-not-integer", "a.ts", "[Version] 2.0\n# MHz S RI R 50\n[Number of Ports] x\n", 3,
     "positive integer"),
    ("v2-ports-vs-extension", "a.s3p", "[Version] 2.0\n# MHz S RI R 50\n[Number of Ports] 2\n",
     3, "extension .s3p says 3"),
    ("v2-no-ports", "a.ts", "[Version] 2.0\n# MHz S RI R 50\n[Number of Frequencies] 1\n"
     "[Network Data]\n900 0.1 0.2\n[End]\n", 4, "after [Number of Ports]"),
    ("v2-no-order", "a.ts", "[Version] 2.0\n# MHz S RI R 50\n[Number of Ports] 2\n"
     "[Number of Frequencies] 1\n[Network Data]\n", 5, "[Two-Port Data Order]"),
    ("v2-bad-order", "a.ts", "[Version] 2.0\n# MHz S RI R 50\n[Number of Ports] 2\n"
     "[Two-Port Data Order] 11_22\n", 4, "12_21 or 21_12"),
    ("v2-count-mismatch", "a.ts", V2_HEAD + f"900 {ROW2}\n[End]\n", 5,
     "says 2 but the file holds 1"),
    ("v2-no-end", "a.ts", V2_HEAD + f"900 {ROW2}\n910 {ROW2}\n", 8, "[End] is missing"),
    ("v2-reference-short", "a.ts", "[Version] 2.0\n# MHz S RI R 50\n[Number of Ports] 2\n"
     "[Reference] 50\n[Number of Frequencies] 1\n", 4, "needs 2 value(s), got 1"),
    ("v2-reference-bad", "a.ts", "[Version] 2.0\n# MHz S RI R 50\n[Number of Ports] 1\n"
     "[Reference] 0\n", 4, "positive numbers"),
    ("v2-matrix-format", "a.ts", "[Version] 2.0\n# MHz S RI R 50\n[Matrix Format] Diagonal\n",
     3, "Full, Lower or Upper"),
    ("v2-mixed-mode", "a.ts", "[Version] 2.0\n# MHz S RI R 50\n[Number of Ports] 2\n"
     "[Mixed-Mode Order] D2,1 C2,1\n", 4, "mixed-mode"),
    ("v2-data-early", "a.ts", "[Version] 2.0\n# MHz S RI R 50\n[Number of Ports] 1\n"
     "900 0.1 0.2\n", 4, "before [Network Data]"),
    ("v2-info-open", "a.ts", "[Version] 2.0\n# MHz S RI R 50\n[Begin Information]\nabc\n", 3,
     "without [End Information]"),
    ("v2-keyword-twice", "a.ts", "[Version] 2.0\n# MHz S RI R 50\n[Number of Ports] 1\n"
     "[Number of Ports] 1\n", 4, "appears twice (first at line 3)"),
    ("v2-keyword-after-data", "a.ts", "[Version] 2.0\n# MHz S RI R 50\n[Number of Ports] 1\n"
     "[Number of Frequencies] 1\n[Network Data]\n900 0.1 0.2\n[Reference] 50\n", 7,
     "after [Network Data]"),
    ("v2-no-option-line", "a.ts", "[Version] 2.0\n[Number of Ports] 1\n", 2,
     "option line"),
    ("malformed-keyword", "a.ts", "[Version] 2.0\n# MHz S RI R 50\n[Number of Ports 1\n", 3,
     "malformed keyword"),
    ("db-overflow", "a.s1p", "# MHz S DB R 50\n900 1e5 0\n", 2, "overflow"),
]


@pytest.mark.parametrize(("name", "content", "line", "words"),
                         [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_malformed_file_names_file_and_line(tmp_path: Path, name: str, content: str,
                                            line: int, words: str) -> None:
    path = tmp_path / name
    path.write_text(content)
    with pytest.raises(TouchstoneError) as info:
        read_touchstone(path)
    message = str(info.value)
    assert message.startswith(f"{path}:{line}: "), message
    assert words in message
    assert "\n" not in message


def test_file_level_errors(tmp_path: Path) -> None:
    with pytest.raises(TouchstoneError, match=r"nothere\.s1p: no such file"):
        read_touchstone(tmp_path / "nothere.s1p")
    with pytest.raises(TouchstoneError, match="is a directory"):
        read_touchstone(tmp_path)
    p = tmp_path / "data.txt"
    p.write_text("# MHz S RI R 50\n900 0.1 0.2\n")
    with pytest.raises(TouchstoneError, match=r"data\.txt: cannot tell the number of ports"):
        read_touchstone(p)


def test_open_circuit_port_is_named(tmp_path: Path) -> None:
    p = tmp_path / "open.s1p"
    p.write_text("# MHz S MA R 50\n900 0.5 0\n910 1 0\n920 0.5 0\n")
    with pytest.raises(TouchstoneError, match=r"open\.s1p:3: S11 = 1 at 910 MHz"):
        evaluate_touchstone(p)


# --------------------------------------------------------------------------- fuzzing

VALID = [
    ("tag.s1p", "! drawer tag\n# MHz S DB R 50\n900 -3.1 -40\n! between\n910 -8.2 -10\n"
                "920 -12.5 20\n930 -7 45\n940 -4 60\n950 -3 70\n960 -2.5 80\n"),
    ("pair.s2p", f"# GHz S MA R 50\n0.9 {ROW2}\n0.95 {ROW2}\n1.0 {ROW2}\n"
                 "0.9 0.5 0.3 40 0.2\n"),
    ("three.s3p", "# Hz Z RI R 50\n9e8 1 2 3 4 5 6\n 1 2 3 4 5 6\n 1 2 3 4 5 6\n"
                  "9.1e8 1 2 3 4 5 6\n 1 2 3 4 5 6\n 1 2 3 4 5 6\n"),
    ("two.ts", V2_HEAD.replace("[Network Data]", "[Reference] 50 75\n[Network Data]")
     + f"900 {ROW2}\n910 {ROW2}\n[End]\n"),
    ("lower.ts", "[Version] 2.1\n# kHz Y RI R 50\n[Number of Ports] 2\n"
                 "[Two-Port Data Order] 21_12\n[Number of Frequencies] 2\n"
                 "[Matrix Format] Lower\n[Network Data]\n900000 0.01 0.002\n 0.001 0 0.02 0.01\n"
                 "910000 0.01 0.002\n 0.001 0 0.02 0.01\n[End]\n"),
]
ALPHABET = "0123456789 .-+eE\n\t!#[]RrSsZzYyMmAaDdBbIiGgHhzkK_,x"


@st.composite
def mutated(draw) -> tuple[str, str]:
    name, text = draw(st.sampled_from(VALID))
    for _ in range(draw(st.integers(1, 4))):
        op = draw(st.sampled_from(["delete", "insert", "replace", "truncate", "dup-line"]))
        i = draw(st.integers(0, len(text)))
        if op == "delete":
            text = text[:i] + text[i + draw(st.integers(1, 12)):]
        elif op == "insert":
            text = text[:i] + draw(st.text(ALPHABET, min_size=1, max_size=12)) + text[i:]
        elif op == "replace":
            text = text[:i] + draw(st.text(ALPHABET, min_size=1, max_size=3)) + text[i + 3:]
        elif op == "truncate":
            text = text[:i]
        else:
            lines = text.split("\n")
            k = draw(st.integers(0, max(len(lines) - 1, 0)))
            lines.insert(k, lines[k])
            text = "\n".join(lines)
    ext = draw(st.sampled_from([Path(name).suffix, ".s1p", ".s2p", ".s3p", ".ts", ".txt"]))
    return "fuzz" + ext, text


def _read_and_evaluate(path: Path) -> None:
    try:
        data = read_touchstone(path)
    except TouchstoneError as exc:
        assert str(exc).startswith(str(path)), exc
        assert "\n" not in str(exc)
        return
    assert data.s.shape == (len(data.f_hz), data.n_ports, data.n_ports)
    try:
        ms = evaluate_touchstone(path)
    except TouchstoneError as exc:
        assert str(exc).startswith(str(path)), exc
        return
    assert isinstance(ms, MetricSet)


@given(case=mutated())
@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
def test_fuzz_mutated_files_only_raise_touchstone_error(case: tuple[str, str]) -> None:
    name, text = case
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / name
        path.write_text(text, encoding="utf-8")
        _read_and_evaluate(path)


@given(blob=st.binary(max_size=300), ext=st.sampled_from([".s1p", ".s2p", ".ts"]))
@settings(max_examples=150, deadline=None)
def test_fuzz_random_bytes_only_raise_touchstone_error(blob: bytes, ext: str) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / ("bytes" + ext)
        path.write_bytes(blob)
        _read_and_evaluate(path)


def test_valid_fuzz_seeds_are_valid(tmp_path: Path) -> None:
    for name, text in VALID:
        (tmp_path / name).write_text(text)
        assert read_touchstone(tmp_path / name).f_hz.size >= 2
