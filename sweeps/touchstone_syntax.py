"""Validating parser of Touchstone text, version 1 and 2 (used by :mod:`sweeps.touchstone`).

It checks a file line by line against the rules of the Touchstone File Format Specification
2.0 (IBIS Open Forum, 2009) and 2.1 and collects the option line, the keywords and the numbers
exactly as written; scikit-rf then converts them (:func:`sweeps.touchstone.read_touchstone`).
Every problem is one :class:`~sweeps.errors.TouchstoneError` ``"<file>:<line>: <what>"``.

Layout rules enforced (a frequency's data are its "block"):

- one option line ``# <Hz|kHz|MHz|GHz> <S|Y|Z> <RI|MA|DB> R <ohm>`` (any order, defaults
  ``GHz S MA R 50``) before the data;
- one- and two-port full-matrix data: the frequency and all its values on one line;
- more ports (or a triangular ``[Matrix Format]``): the first matrix row starts on the
  frequency's line, every further row on a new line, a row may wrap over several lines but a
  line never holds values of two rows (the whole block on one line is accepted too);
- frequencies strictly increase; version-1 two-port noise data start at the first 5-number row
  whose frequency does not increase (and are checked, then dropped);
- version 2: ``[Version]`` first, then the option line, ``[Number of Ports]`` before the
  keywords that need it, ``[Two-Port Data Order]`` for two ports, ``[Number of Frequencies]``
  matching the data, ``[Network Data]`` before the data, ``[End]`` at the end; unknown or
  repeated keywords are errors; ``[Begin Information]`` blocks are skipped; mixed-mode data
  and H/G parameters are refused.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

from sweeps.errors import TouchstoneError

__all__ = ["ParsedTouchstone", "UNITS", "UNIT_NAMES", "canonical_text", "parse_touchstone"]

UNITS = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9}
UNIT_NAMES = {"hz": "Hz", "khz": "kHz", "mhz": "MHz", "ghz": "GHz"}
_PARAMETERS = ("s", "y", "z")
_FORMATS = ("ri", "ma", "db")
_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?\Z")
_EXTENSION = re.compile(r"\.[syz](\d+)p\Z", re.IGNORECASE)
_KEYWORD = re.compile(r"\[([^\]]*)\](.*)\Z")
_V2_KEYWORDS = (
    "version", "number of ports", "two-port data order", "number of frequencies",
    "number of noise frequencies", "reference", "matrix format", "mixed-mode order",
    "begin information", "end information", "network data", "noise data", "end",
)


@dataclass
class ParsedTouchstone:
    """What the validating parser found (before scikit-rf converts the numbers)."""

    version: str = "1.0"
    n_ports: int | None = None
    unit: str = "ghz"
    parameter: str = "s"
    fmt: str = "ma"
    r_ohm: str = "50"
    option_line: int | None = None
    reference: list[str] | None = None
    two_port_order: str | None = None
    matrix_format: str = "full"
    n_freq_declared: int | None = None
    n_freq_line: int = 0
    n_noise_declared: int | None = None
    comments: list[str] = field(default_factory=list)
    blocks: list[list[str]] = field(default_factory=list)  # tokens of each frequency, freq first
    block_lines: list[int] = field(default_factory=list)
    freqs: list[float] = field(default_factory=list)


class _Parser:
    """Line-by-line validating parser of Touchstone v1 and v2 (one pass)."""

    def __init__(self, path: Path, text: str) -> None:
        self.path = path
        self.text = text
        self.p = ParsedTouchstone()
        ext = _EXTENSION.search(path.name)
        self.ext_ports = int(ext.group(1)) if ext else None
        self.mode: Literal["header", "network", "noise", "info", "end"] = "header"
        self.seen: dict[str, int] = {}
        self.pending_reference: int = 0
        self.reference_line = 0
        self.row_sizes: list[int] = []
        self.row = 0
        self.row_left = 0
        self.row_last_line = 0
        self.noise_rows = 0
        self.noise_last_f = -math.inf
        self.last_line = 0
        self.first_content = True

    def fail(self, line: int, what: str) -> TouchstoneError:
        return TouchstoneError(f"{self.path}:{line}: {what}")

    # -- driver
    def run(self) -> ParsedTouchstone:
        lines = self.text.split("\n")
        any_content = False
        for number, raw in enumerate(lines, start=1):
            content, bang, comment = raw.partition("!")
            if bang:
                self.p.comments.append(comment.strip())
            content = content.strip()
            if not content:
                continue
            any_content = True
            self.last_line = number
            self.line(number, content)
        if not any_content:
            raise self.fail(1, "empty Touchstone file: no option line and no data")
        self.finish()
        return self.p

    def line(self, number: int, content: str) -> None:
        first = self.first_content
        self.first_content = False
        if self.mode == "end":
            return  # the specification ignores anything after [End]
        if self.mode == "info":
            if content.lower().replace(" ", "").startswith("[endinformation]"):
                self.mode = "header"
            return
        if content.startswith("["):
            self.keyword(number, content, first)
        elif content.startswith("#"):
            self.option(number, content)
        else:
            self.data(number, content)

    # -- option line
    def option(self, number: int, content: str) -> None:
        p = self.p
        if p.option_line is not None:
            raise self.fail(number, f"a second option line (the first is at line {p.option_line})"
                                    "; a file has one option line")
        if p.blocks or self.row_sizes:
            raise self.fail(number, "the option line must come before the data")
        if p.version != "1.0" and "number of ports" in self.seen:
            raise self.fail(number, "in a version-2 file the option line comes before "
                                    "[Number of Ports]")
        toks = content[1:].split()
        got: dict[str, str] = {}
        i = 0
        while i < len(toks):
            t = toks[i].lower()
            kind = ("unit" if t in UNITS else "parameter" if t in _PARAMETERS + ("g", "h")
                    else "format" if t in _FORMATS else "r" if t == "r" else None)
            if kind is None:
                raise self.fail(number, f"unknown option {toks[i]!r} in the option line "
                                        "(expected # <Hz|kHz|MHz|GHz> <S|Y|Z> <RI|MA|DB> R <ohm>)")
            if kind in got:
                raise self.fail(number, f"the option line gives the {kind} twice")
            if kind == "r":
                if i + 1 >= len(toks) or not _NUMBER.match(toks[i + 1]):
                    raise self.fail(number, "option 'R' must be followed by the reference "
                                            "resistance in ohm")
                value = toks[i + 1]
                if not float(value) > 0:
                    raise self.fail(number, f"reference resistance R must be > 0 (got {value})")
                got[kind] = value
                i += 2
                continue
            if t in ("g", "h"):
                raise self.fail(number, f"{t.upper()}-parameters are not supported (S, Y or Z "
                                        "are; the antenna port needs an impedance)")
            got[kind] = t
            i += 1
        p.unit = got.get("unit", p.unit)
        p.parameter = got.get("parameter", p.parameter)
        p.fmt = got.get("format", p.fmt)
        p.r_ohm = got.get("r", p.r_ohm)
        p.option_line = number

    # -- keywords (version 2)
    def keyword(self, number: int, content: str, first: bool) -> None:
        m = _KEYWORD.match(content)
        if not m:
            raise self.fail(number, f"malformed keyword line {content[:40]!r} (expected "
                                    "[Keyword] value)")
        name = " ".join(m.group(1).lower().split())
        value = m.group(2).strip()
        p = self.p
        if name == "version":
            if not first:
                raise self.fail(number, "[Version] must be the first line that is not a "
                                        "comment")
            if value not in ("2.0", "2.1"):
                raise self.fail(number, f"unsupported [Version] {value!r} (2.0 or 2.1; "
                                        "version-1 files have no [Version] line)")
            p.version = value
            self.seen[name] = number
            return
        if p.version == "1.0":
            raise self.fail(number, f"keyword [{m.group(1)}] in a file without [Version]: "
                                    "version-1 files have no keywords, version-2 files start "
                                    "with [Version] 2.0")
        if name not in _V2_KEYWORDS:
            raise self.fail(number, f"unknown keyword [{m.group(1)}]")
        if name in self.seen and name not in ("begin information", "end information"):
            raise self.fail(number, f"[{m.group(1)}] appears twice (first at line "
                                    f"{self.seen[name]})")
        if self.pending_reference:
            raise self.fail(self.reference_line, f"[Reference] needs {p.n_ports} value(s), "
                                                 f"got {p.n_ports - self.pending_reference}")
        if self.mode == "network" and name not in ("noise data", "end"):
            raise self.fail(number, f"[{m.group(1)}] after [Network Data]")
        self.seen[name] = number
        handler = getattr(self, "kw_" + name.replace(" ", "_").replace("-", "_"))
        handler(number, value)

    def _need_value(self, number: int, value: str, what: str) -> None:
        if not value:
            raise self.fail(number, f"{what} needs a value")

    def _int(self, number: int, value: str, what: str) -> int:
        if not re.fullmatch(r"\d+", value) or int(value) < 1:
            raise self.fail(number, f"{what} must be a positive integer (got {value!r})")
        return int(value)

    def kw_number_of_ports(self, number: int, value: str) -> None:
        if self.p.option_line is None:
            raise self.fail(number, "in a version-2 file the option line (# ...) comes before "
                                    "[Number of Ports]")
        n = self._int(number, value, "[Number of Ports]")
        if self.ext_ports is not None and n != self.ext_ports:
            raise self.fail(number, f"[Number of Ports] {n} but the extension "
                                    f"{Path(self.path).suffix} says {self.ext_ports} port(s)")
        self.p.n_ports = n

    def _need_ports(self, number: int, name: str) -> int:
        if self.p.n_ports is None:
            raise self.fail(number, f"[{name}] must come after [Number of Ports]")
        return self.p.n_ports

    def kw_two_port_data_order(self, number: int, value: str) -> None:
        n = self._need_ports(number, "Two-Port Data Order")
        if n != 2:
            raise self.fail(number, f"[Two-Port Data Order] is only for 2-port files (this one "
                                    f"has {n})")
        if value not in ("12_21", "21_12"):
            raise self.fail(number, f"[Two-Port Data Order] must be 12_21 or 21_12 (got "
                                    f"{value!r})")
        self.p.two_port_order = value

    def kw_number_of_frequencies(self, number: int, value: str) -> None:
        self.p.n_freq_declared = self._int(number, value, "[Number of Frequencies]")
        self.p.n_freq_line = number

    def kw_number_of_noise_frequencies(self, number: int, value: str) -> None:
        self.p.n_noise_declared = self._int(number, value, "[Number of Noise Frequencies]")

    def kw_reference(self, number: int, value: str) -> None:
        n = self._need_ports(number, "Reference")
        self.p.reference = []
        self.pending_reference = n
        self.reference_line = number
        if value:
            self.reference_values(number, value)

    def reference_values(self, number: int, content: str) -> None:
        for tok in content.split():
            if not self.pending_reference:
                raise self.fail(number, f"[Reference] has more than {self.p.n_ports} value(s)")
            if not _NUMBER.match(tok) or not float(tok) > 0:
                raise self.fail(number, f"[Reference] values must be positive numbers in ohm "
                                        f"(got {tok!r})")
            assert self.p.reference is not None
            self.p.reference.append(tok)
            self.pending_reference -= 1

    def kw_matrix_format(self, number: int, value: str) -> None:
        if value.lower() not in ("full", "lower", "upper"):
            raise self.fail(number, f"[Matrix Format] must be Full, Lower or Upper (got "
                                    f"{value!r})")
        self.p.matrix_format = value.lower()

    def kw_mixed_mode_order(self, number: int, value: str) -> None:
        raise self.fail(number, "mixed-mode data ([Mixed-Mode Order]) are not supported")

    def kw_begin_information(self, number: int, value: str) -> None:
        self.mode = "info"
        self.seen["info open"] = number

    def kw_end_information(self, number: int, value: str) -> None:
        raise self.fail(number, "[End Information] without [Begin Information]")

    def kw_network_data(self, number: int, value: str) -> None:
        p = self.p
        if p.option_line is None:
            raise self.fail(number, "the option line (# <unit> <parameter> <format> R <ohm>) "
                                    "is missing before [Network Data]")
        n = self._need_ports(number, "Network Data")
        if p.n_freq_declared is None:
            raise self.fail(number, "[Number of Frequencies] is missing before [Network Data]")
        if n == 2 and p.two_port_order is None:
            raise self.fail(number, "[Two-Port Data Order] (12_21 or 21_12) is required for a "
                                    "2-port file")
        self.start_network()

    def kw_noise_data(self, number: int, value: str) -> None:
        if self.mode != "network":
            raise self.fail(number, "[Noise Data] must follow the network data")
        self.end_network(number)
        if self.p.n_ports != 2:
            raise self.fail(number, "[Noise Data] is only for 2-port files")
        if self.p.n_noise_declared is None:
            raise self.fail(number, "[Noise Data] needs [Number of Noise Frequencies]")
        self.mode = "noise"

    def kw_end(self, number: int, value: str) -> None:
        if self.mode == "network":
            self.end_network(number)
        elif self.mode == "noise":
            self.end_noise(number)
        else:
            raise self.fail(number, "[End] before [Network Data]")
        self.mode = "end"

    # -- data
    def start_network(self) -> None:
        n = self.p.n_ports
        assert n is not None
        if self.p.matrix_format == "full":
            pairs = [n] * n
        elif self.p.matrix_format == "lower":
            pairs = [r + 1 for r in range(n)]
        else:
            pairs = [n - r for r in range(n)]
        self.row_sizes = [2 * k for k in pairs]
        self.mode = "network"
        self.row = 0
        self.row_left = 0

    def block_size(self) -> int:
        return sum(self.row_sizes)

    def numbers(self, number: int, content: str) -> list[str]:
        toks = content.split()
        for tok in toks:
            if not _NUMBER.match(tok):
                raise self.fail(number, f"non-numeric value {tok[:30]!r} in the data")
        return toks

    def data(self, number: int, content: str) -> None:
        p = self.p
        if self.pending_reference:
            self.reference_values(number, content)
            return
        if p.version != "1.0":
            if self.mode == "header":
                raise self.fail(number, "data before [Network Data]")
            if self.mode == "noise":
                self.noise_line(number, self.numbers(number, content))
                return
        elif self.mode == "header":
            if self.ext_ports is None:
                raise TouchstoneError(
                    f"{self.path}: cannot tell the number of ports: a version-1 file needs the "
                    "extension .sNp (N = number of ports), or write a version-2 file with "
                    "[Version] 2.0 and [Number of Ports]"
                )
            p.n_ports = self.ext_ports
            self.start_network()
        elif self.mode == "noise":
            self.noise_line(number, self.numbers(number, content))
            return
        toks = self.numbers(number, content)
        if self.row_left == 0 and self.row == 0:
            self.new_block(number, toks)
        else:
            self.continue_block(number, toks)

    def _hint(self, count: int) -> str:
        """Port count whose single-line layout would give ``count`` numbers, as a hint."""
        n = self.p.n_ports
        for m in (1, 2):
            if m != n and count == 1 + 2 * m * m:
                src = (f"the extension {Path(self.path).suffix}" if self.p.version == "1.0"
                       else "[Number of Ports]")
                return f"; that is the layout of {m}-port data, but {src} says {n} port(s)"
        return ""

    def new_block(self, number: int, toks: list[str]) -> None:
        p = self.p
        f = float(toks[0])
        values = toks[1:]
        total = self.block_size()
        # version-1 two-port noise data: a 5-number row whose frequency does not increase
        if (p.version == "1.0" and p.n_ports == 2 and p.freqs and len(toks) == 5
                and f <= p.freqs[-1]):
            self.mode = "noise"
            self.noise_line(number, toks)
            return
        if p.freqs and not f > p.freqs[-1]:
            raise self.fail(number, f"frequencies must increase: {toks[0]} after "
                                    f"{p.freqs[-1]:g} (line {p.block_lines[-1]})")
        if f < 0:
            raise self.fail(number, f"negative frequency {toks[0]}")
        p.freqs.append(f)
        p.blocks.append(list(toks))
        p.block_lines.append(number)
        if len(values) == total:
            return  # the whole frequency on one line
        if p.n_ports is not None and p.n_ports <= 2 and p.matrix_format == "full":
            if len(values) < total:
                what = f"truncated data row: {len(toks)} number(s) where {1 + total} are needed"
            else:
                what = f"too many values: {len(toks)} numbers where {1 + total} are needed"
            raise self.fail(number, f"{what} for {p.n_ports}-port data (frequency and "
                                    f"{total // 2} complex value(s)){self._hint(len(toks))}")
        self.row = 0
        self.row_left = self.row_sizes[0]
        self.take(number, values, len(toks))

    def continue_block(self, number: int, toks: list[str]) -> None:
        self.p.blocks[-1].extend(toks)
        self.take(number, toks, None)

    def take(self, number: int, values: list[str], first_count: int | None) -> None:
        """Consume the values of one line into the current row; a line never crosses rows."""
        k = len(values)
        if k > self.row_left:
            if first_count is not None:
                raise self.fail(number, f"{first_count} numbers on the first line of a "
                                        f"frequency, but a row of {self.p.n_ports}-port data "
                                        f"has 1 + {self.row_sizes[0]}"
                                        f"{self._hint(first_count)}")
            raise self.fail(self.row_last_line,
                            f"truncated data row: row {self.row + 1} of the data for frequency "
                            f"{self.p.blocks[-1][0]} has {self.row_sizes[self.row] - self.row_left}"
                            f" of {self.row_sizes[self.row]} values (line {number} has {k} more)")
        self.row_left -= k
        self.row_last_line = number
        if self.row_left == 0:
            self.row += 1
            if self.row == len(self.row_sizes):
                self.row = 0  # block complete
            else:
                self.row_left = self.row_sizes[self.row]

    def block_open(self) -> bool:
        return self.row_left > 0 or self.row > 0

    def end_network(self, number: int) -> None:
        if self.block_open():
            raise self.fail(self.row_last_line,
                            f"truncated data row: row {self.row + 1} of the data for frequency "
                            f"{self.p.blocks[-1][0]} has {self.row_sizes[self.row] - self.row_left}"
                            f" of {self.row_sizes[self.row]} values")
        p = self.p
        if not p.blocks:
            raise self.fail(number, "no network data")
        if p.n_freq_declared is not None and p.n_freq_declared != len(p.blocks):
            raise self.fail(p.n_freq_line, f"[Number of Frequencies] says {p.n_freq_declared} "
                                           f"but the file holds {len(p.blocks)} (truncated?)")

    def noise_line(self, number: int, toks: list[str]) -> None:
        if len(toks) != 5:
            raise self.fail(number, f"noise data rows have 5 numbers (frequency, NFmin, "
                                    f"|Gamma_opt|, angle, Rn/R); this one has {len(toks)}")
        f = float(toks[0])
        if not f > self.noise_last_f:
            raise self.fail(number, f"noise frequencies must increase: {toks[0]} after "
                                    f"{self.noise_last_f:g}")
        self.noise_last_f = f
        self.noise_rows += 1

    def end_noise(self, number: int) -> None:
        declared = self.p.n_noise_declared
        if declared is not None and declared != self.noise_rows:
            raise self.fail(number, f"[Number of Noise Frequencies] says {declared} but the "
                                    f"file holds {self.noise_rows}")

    def finish(self) -> None:
        p = self.p
        last = self.last_line
        if self.pending_reference:
            raise self.fail(self.reference_line, f"[Reference] needs {p.n_ports} value(s), got "
                                                 f"{p.n_ports - self.pending_reference}")
        if self.mode == "info":
            raise self.fail(self.seen["info open"], "[Begin Information] without "
                                                    "[End Information]")
        if p.version == "1.0":
            if self.mode == "header":
                raise self.fail(last, "no network data (only an option line and comments)")
            if self.mode == "network":
                self.end_network(last)
            return
        if self.mode != "end":
            if self.mode == "header" and "network data" not in self.seen:
                raise self.fail(last, "[Network Data] is missing")
            raise self.fail(last, "[End] is missing: the file ends early (truncated?)")


def canonical_text(p: ParsedTouchstone) -> str:
    """The data for scikit-rf: option line, keywords and numbers as written, no comments."""
    n = p.n_ports
    assert n is not None
    out = []
    if p.version != "1.0":
        out.append(f"[Version] {p.version}")
    out.append(f"# {UNIT_NAMES[p.unit]} {p.parameter.upper()} {p.fmt.upper()} R {p.r_ohm}")
    if p.version != "1.0":
        out.append(f"[Number of Ports] {n}")
        if n == 2:
            out.append(f"[Two-Port Data Order] {p.two_port_order}")
        out.append(f"[Number of Frequencies] {len(p.blocks)}")
        if p.reference is not None:
            out.append("[Reference] " + " ".join(p.reference))
        out.append(f"[Matrix Format] {p.matrix_format.capitalize()}")
        out.append("[Network Data]")
    out.extend(" ".join(block) for block in p.blocks)
    if p.version != "1.0":
        out.append("[End]")
    return "\n".join(out) + "\n"


def parse_touchstone(path: Path, text: str) -> ParsedTouchstone:
    """Check ``text`` (the content of ``path``) and collect what it holds.

    Raises
    ------
    TouchstoneError
        ``"<file>:<line>: <what>"`` for the first rule the file breaks.
    """
    return _Parser(path, text).run()
