"""Touchstone files: read (validated, then converted through scikit-rf), evaluate, write.

Touchstone is an open standard (Touchstone File Format Specification 2.0, IBIS Open Forum 2009,
and 2.1). filamant reads version 1 files (``.sNp``, the port count from the extension) and
version 2 files (``[Version] 2.0`` / ``2.1``, any extension), with comments (``!``) anywhere,
frequency units Hz/kHz/MHz/GHz, data formats RI/MA/DB and S, Y or Z parameters (normalised to
the option line's ``R`` in version 1, not normalised in version 2, as the specification says).

Reading happens in two steps. :func:`read_touchstone` first parses the whole file itself and
checks it against the specification's rules, so a malformed file gives one
:class:`~sweeps.errors.TouchstoneError` ``"<file>:<line>: <what>"``: empty file, unknown or
invalid option line, non-numeric values, truncated rows, values that do not fit the port count
of the ``.sNp`` extension, frequencies not increasing, version-2 keyword errors. Then it hands a
canonical copy of the data (option line, keywords, numbers exactly as written; no comments)
to scikit-rf, which does the conversions (dB/angle to complex, Y/Z to S, two-port data order,
lower/upper triangular matrices). Comments are kept by filamant, so scikit-rf never interprets
a comment as data. Noise parameters (two-port files) are checked and dropped: no metric uses
them. Mixed-mode data and H/G parameters are refused with a clear message.

:func:`evaluate_touchstone` computes every metric that S-parameters allow
(:func:`sweeps.metrics.compute_metrics`); :func:`write_touchstone` writes an N-port impedance
result through scikit-rf.
"""

from __future__ import annotations

import functools
import io
import logging
import math
import os
import re
import tempfile
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from sweeps.design import Reader, SwitchStates
from sweeps.errors import FilamantError, TouchstoneError
from sweeps.metrics import MetricSet, compute_metrics

__all__ = ["TouchstoneData", "evaluate_touchstone", "read_touchstone", "write_touchstone"]

log = logging.getLogger(__name__)

_UNITS = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9}
_UNIT_NAMES = {"hz": "Hz", "khz": "kHz", "mhz": "MHz", "ghz": "GHz"}
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


@dataclass(frozen=True)
class TouchstoneData:
    """The content of a Touchstone file, SI units.

    Attributes
    ----------
    path : Path
    f_hz : ndarray, shape (F,)
        Frequencies in Hz, strictly increasing.
    s : ndarray, shape (F, P, P)
        Scattering matrix referred to ``z0_ohm`` (converted from Y or Z data if needed).
    z0_ohm : ndarray, shape (P,)
        Real reference impedance of each port in ohm.
    comments : list of str
        The comment lines (text after ``!``), in file order.
    version : {"1.0", "2.0", "2.1"}
        Version 1 files have no ``[Version]`` keyword and are reported as "1.0".
    parameter : {"S", "Y", "Z"}
        The kind of data the file holds.
    data_lines : ndarray of int, shape (F,)
        Line (1-based) where each frequency's data start, for messages.
    """

    path: Path
    f_hz: NDArray[np.float64]
    s: NDArray[np.complex128]
    z0_ohm: NDArray[np.float64]
    comments: list[str]
    version: str
    parameter: str
    data_lines: NDArray[np.int64] = field(repr=False)

    @property
    def n_ports(self) -> int:
        """Number of ports P."""
        return int(self.s.shape[-1])

    def input_impedance(self, port: int = 1) -> NDArray[np.complex128]:
        """Input impedance of ``port`` (1-based) with every other port terminated in its
        reference impedance, in ohm, shape (F,).

        With the other ports matched, the reflection at ``port`` is ``S_pp`` itself, so
        ``Z_in = z0_p (1 + S_pp) / (1 - S_pp)``.
        """
        if not (isinstance(port, int | np.integer) and 1 <= port <= self.n_ports):
            raise TouchstoneError(
                f"{self.path}: port {port!r} does not exist; the file has {self.n_ports} "
                f"port(s) (use 1..{self.n_ports})"
            )
        spp = self.s[:, port - 1, port - 1]
        bad = np.nonzero(np.abs(1.0 - spp) < 1e-12)[0]
        if len(bad):
            i = int(bad[0])
            raise TouchstoneError(
                f"{self.path}:{self.data_lines[i]}: S{port}{port} = 1 at "
                f"{self.f_hz[i] / 1e6:g} MHz: the input impedance is infinite (open circuit)"
            )
        return self.z0_ohm[port - 1] * (1.0 + spp) / (1.0 - spp)

    def network(self):  # -> skrf.Network (not annotated: keeps scikit-rf an import-time option)
        """The data as a :class:`skrf.Network`."""
        import skrf

        freq = skrf.Frequency.from_f(self.f_hz, unit="Hz")
        # z0 as (F, P): a (P,) vector is ambiguous to scikit-rf when F == P
        z0 = np.broadcast_to(self.z0_ohm, (len(self.f_hz), self.n_ports)).copy()
        return skrf.Network(frequency=freq, s=self.s, z0=z0)


# --------------------------------------------------------------------------- parsing


@dataclass
class _Parsed:
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
        self.p = _Parsed()
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
    def run(self) -> _Parsed:
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
            kind = ("unit" if t in _UNITS else "parameter" if t in _PARAMETERS + ("g", "h")
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


def _canonical_text(p: _Parsed) -> str:
    """The data for scikit-rf: option line, keywords and numbers as written, no comments."""
    n = p.n_ports
    assert n is not None
    out = []
    if p.version != "1.0":
        out.append(f"[Version] {p.version}")
    out.append(f"# {_UNIT_NAMES[p.unit]} {p.parameter.upper()} {p.fmt.upper()} R {p.r_ohm}")
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


def _read_text(path: Path) -> str:
    try:
        raw = path.read_bytes()
    except IsADirectoryError:
        raise TouchstoneError(f"{path}: is a directory, not a Touchstone file") from None
    except FileNotFoundError:
        raise TouchstoneError(f"{path}: no such file") from None
    except OSError as exc:
        raise TouchstoneError(f"{path}: cannot read ({exc.strerror or exc})") from None
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        return raw.decode("latin-1")


@functools.cache
def _skrf_scales_v1_y_by_r() -> bool:
    """Whether scikit-rf multiplies version-1 normalised Y data by R (it should divide).

    Touchstone version 1 stores ``y = Y R``; scikit-rf 2.2.0 computes ``Y = y R``. Probed once
    with a one-port file ``y = 1`` at ``R = 50`` (a 50-ohm load, ``S = 0``), so a fixed
    scikit-rf is not corrected twice.
    """
    import skrf

    fid = io.StringIO("# Hz Y RI R 50\n1 1 0\n")
    fid.name = "probe.s1p"
    with warnings.catch_warnings(record=True), np.errstate(all="ignore"):
        warnings.simplefilter("always")
        s = complex(skrf.Network(fid).s[0, 0, 0])
    return abs(s) > 1e-9


def _fix_v1_admittance(s: NDArray[np.complex128], z0: NDArray[np.complex128],
                       r_ohm: float) -> NDArray[np.complex128]:
    """Undo scikit-rf's ``Y = y R`` for version-1 Y data: the right value is ``y / R``."""
    from skrf.network import s2y, y2s

    with np.errstate(all="ignore"):
        return y2s(s2y(s, z0) / r_ohm**2, z0)


def read_touchstone(path: str | os.PathLike[str]) -> TouchstoneData:
    """Read and validate a Touchstone file (v1 or v2) through scikit-rf.

    Parameters
    ----------
    path : path-like
        A ``.sNp`` file (version 1 or 2) or a version-2 file with any extension (``.ts``).

    Returns
    -------
    TouchstoneData

    Raises
    ------
    TouchstoneError
        ``"<file>:<line>: <what>"`` for every malformed file (and ``"<file>: ..."`` when the
        file cannot be read or its name does not tell the port count).
    """
    path = Path(path)
    parsed = _Parser(path, _read_text(path)).run()
    assert parsed.n_ports is not None
    first_line = parsed.block_lines[0] if parsed.block_lines else 1
    n = parsed.n_ports
    text = _canonical_text(parsed)
    try:
        import skrf

        fid = io.StringIO(text)
        fid.name = "data.ts" if parsed.version != "1.0" else f"data.s{n}p"
        with warnings.catch_warnings(record=True) as caught, \
                np.errstate(all="ignore"):
            warnings.simplefilter("always")
            net = skrf.Network(fid)
        for w in caught:
            log.debug("%s: scikit-rf: %s", path, w.message)
    except Exception as exc:  # scikit-rf raises many types; report them as one clear line
        raise TouchstoneError(
            f"{path}:{first_line}: scikit-rf could not convert the data ({type(exc).__name__}: "
            f"{exc})"
        ) from exc
    f_hz = np.asarray(net.f, dtype=float)
    s = np.asarray(net.s, dtype=complex)
    z0 = np.asarray(net.z0, dtype=complex)
    if parsed.version == "1.0" and parsed.parameter == "y" and _skrf_scales_v1_y_by_r():
        try:
            s = _fix_v1_admittance(s, z0, float(parsed.r_ohm))
        except Exception as exc:  # a singular Y matrix: reported below as non-finite
            log.debug("%s: admittance correction failed: %s", path, exc)
            s = np.full_like(s, np.nan)
    lines = np.asarray(parsed.block_lines, dtype=np.int64)
    expected_f = np.asarray(parsed.freqs) * _UNITS[parsed.unit]
    if s.shape != (len(expected_f), n, n) or not np.allclose(f_hz, expected_f, rtol=1e-12,
                                                              atol=0.0):
        raise TouchstoneError(
            f"{path}:{first_line}: scikit-rf read {s.shape[0]} frequencies x {s.shape[-1]} "
            f"port(s) where the file holds {len(expected_f)} x {n}"
        )
    finite = np.all(np.isfinite(s.reshape(len(f_hz), -1)), axis=1)
    if not finite.all():
        i = int(np.argmin(finite))
        what = ("the Z/Y matrix cannot be converted to S (singular)" if parsed.parameter != "s"
                else "the values overflow (for example a dB value too large)")
        raise TouchstoneError(f"{path}:{lines[i]}: {what} at {parsed.blocks[i][0]} "
                              f"{_UNIT_NAMES[parsed.unit]}")
    return TouchstoneData(
        path=path,
        f_hz=f_hz,
        s=s,
        z0_ohm=np.real(z0[0]).astype(float),
        comments=parsed.comments,
        version=parsed.version,
        parameter=parsed.parameter.upper(),
        data_lines=lines,
    )


# --------------------------------------------------------------------------- evaluation


def evaluate_touchstone(
    path: str | os.PathLike[str],
    port: int = 1,
    *,
    target_hz: float | None = None,
    z0_ohm: float | None = None,
    switch: SwitchStates | None = None,
    reader: Reader | None = None,
) -> MetricSet:
    """Every metric that S-parameters allow, for one port of a Touchstone result.

    The antenna is ``port`` (1-based); for a multi-port file its input impedance is taken with
    every other port terminated in its reference impedance
    (:meth:`TouchstoneData.input_impedance`). ``efficiency`` ("needs currents"), ``gain_dbi``
    ("needs fields"), ``delta_rcs_dbsm`` and ``read_range_m`` (need the gain) and
    ``chu_ratio`` (needs the antenna's size) are ``None`` with the reason. Frequencies at or
    below 0 Hz (a DC point) are left out of the metrics.

    Parameters
    ----------
    path : path-like
    port : int
        Antenna port, 1-based.
    target_hz : float, optional
        Frequency of the point metrics in Hz; by default the middle of the file's range.
    z0_ohm : float, optional
        Reference impedance of ``s11_db`` and the bandwidth; by default the port's reference
        impedance in the file.
    switch : SwitchStates, optional
        The two switch loads; by default :class:`~sweeps.design.SwitchStates` (the documented
        defaults).
    reader : Reader, optional
        Unused for S-parameter data (the read range needs the gain) but accepted so callers
        can pass the same arguments as for a design.

    Returns
    -------
    MetricSet

    Raises
    ------
    TouchstoneError
        Malformed file, a port that does not exist, a target outside the data.
    """
    data = read_touchstone(path)
    zin = data.input_impedance(port)
    keep = data.f_hz > 0
    f_hz, zin = data.f_hz[keep], zin[keep]
    if len(f_hz) == 0:
        raise TouchstoneError(f"{data.path}:{data.data_lines[0]}: no frequency above 0 Hz")
    if target_hz is None:
        target_hz = 0.5 * (f_hz[0] + f_hz[-1])
    if not (f_hz[0] * (1 - 1e-12) <= target_hz <= f_hz[-1] * (1 + 1e-12)):
        raise TouchstoneError(
            f"{data.path}: target {target_hz / 1e6:g} MHz lies outside the file's data "
            f"({f_hz[0] / 1e6:g}-{f_hz[-1] / 1e6:g} MHz)"
        )
    z0 = float(data.z0_ohm[port - 1]) if z0_ohm is None else float(z0_ohm)
    try:
        return compute_metrics(
            f_hz, zin, target_hz=float(target_hz), z0_ohm=z0,
            switch=switch if switch is not None else SwitchStates(), reader=reader,
        )
    except FilamantError as exc:
        if isinstance(exc, TouchstoneError):
            raise
        raise TouchstoneError(f"{data.path}: {exc}") from exc


# --------------------------------------------------------------------------- writing


def write_touchstone(
    path: str | os.PathLike[str],
    f_hz: ArrayLike,
    z: ArrayLike,
    z0_ohm: float | ArrayLike,
    comments: Sequence[str],
    *,
    version: Literal["1.0", "2.1"] | None = None,
) -> Path:
    """Write an N-port impedance result as a Touchstone file through scikit-rf.

    The file holds S-parameters in RI form referred to ``z0_ohm``, the ``comments`` as ``!``
    lines (design parameters), and no ``[Begin Information]`` block (scikit-rf 2.2.0 cannot
    read those back). The file is written to a temporary file beside ``path``, read back and
    checked, then moved into place, so a failure never leaves a half-written file.

    Parameters
    ----------
    path : path-like
        Target file; its extension must be ``.sNp`` with N the port count (``.ts`` is also
        accepted for version 2).
    f_hz : array_like, shape (F,)
        Positive, strictly increasing frequencies in Hz.
    z : array_like, shape (F, P, P)
        Port impedance matrix in ohm (shape (F,) is taken as one port).
    z0_ohm : float or array_like, shape (P,)
        Real reference impedance(s) in ohm, > 0.
    comments : sequence of str
        Comment lines; written in ASCII (other characters become ``?``).
    version : {"1.0", "2.1"}, optional
        Touchstone version; by default 1.0 (the most widely read) when all reference
        impedances are equal, 2.1 otherwise (version 1 has a single reference).

    Returns
    -------
    Path
        The file written.
    """
    path = Path(path)
    f = np.asarray(f_hz, dtype=float)
    zz = np.asarray(z, dtype=complex)
    if zz.ndim == 1:
        zz = zz[:, None, None]
    if f.ndim != 1 or zz.ndim != 3 or zz.shape[0] != len(f) or zz.shape[1] != zz.shape[2]:
        raise TouchstoneError(
            f"{path}: need f_hz of shape (F,) and z of shape (F, P, P) (got {f.shape} and "
            f"{zz.shape})"
        )
    n = zz.shape[1]
    if len(f) == 0 or not np.all(np.isfinite(f)) or np.any(f <= 0) or np.any(np.diff(f) <= 0):
        raise TouchstoneError(f"{path}: frequencies must be positive, finite and strictly "
                              "increasing")
    if not np.all(np.isfinite(zz)):
        raise TouchstoneError(f"{path}: the impedance matrix has non-finite values")
    z0 = np.broadcast_to(np.asarray(z0_ohm, dtype=float), (n,)).copy()
    if not np.all(np.isfinite(z0) & (z0 > 0)):
        raise TouchstoneError(f"{path}: reference impedances must be > 0 ohm (got {z0_ohm!r})")
    if version is None:
        version = "1.0" if np.all(z0 == z0[0]) else "2.1"
    if version not in ("1.0", "2.1"):
        raise TouchstoneError(f"{path}: version must be '1.0' or '2.1' (got {version!r})")
    if version == "1.0" and not np.all(z0 == z0[0]):
        raise TouchstoneError(f"{path}: version 1.0 has one reference impedance; the ports "
                              f"differ ({z0.tolist()}): write version 2.1")
    suffix = path.suffix.lower()
    if suffix != f".s{n}p" and not (suffix == ".ts" and version != "1.0"):
        raise TouchstoneError(
            f"{path}: a {n}-port result needs the extension .s{n}p (got "
            f"{path.suffix or 'none'})"
        )
    lines: list[str] = []
    for c in comments:
        for part in str(c).splitlines() or [""]:
            lines.append(part.encode("ascii", "replace").decode("ascii"))
    try:
        import skrf

        freq = skrf.Frequency.from_f(f, unit="Hz")
        with warnings.catch_warnings(record=True) as caught, np.errstate(all="ignore"):
            warnings.simplefilter("always")
            # z0 as (F, P): a (P,) vector is ambiguous to scikit-rf when F == P
            net = skrf.Network.from_z(zz, frequency=freq,
                                      z0=np.broadcast_to(z0, (len(f), n)).copy())
            net.comments = "\n".join(lines)
            text = net.write_touchstone(filename=path.name, return_string=True, form="ri",
                                        version=version,
                                        skrf_comment=False)
        for w in caught:
            log.debug("%s: scikit-rf: %s", path, w.message)
    except Exception as exc:  # any scikit-rf failure becomes one clear line
        raise TouchstoneError(f"{path}: scikit-rf could not write the data "
                              f"({type(exc).__name__}: {exc})") from exc
    if not np.all(np.isfinite(net.s)):
        raise TouchstoneError(f"{path}: Z + z0 is singular at some frequency: no S-parameters")
    return _write_checked(path, text, net.s, n)


def _write_checked(path: Path, text: str, s: NDArray[np.complex128], n: int) -> Path:
    directory = path.parent
    if not directory.is_dir():
        raise TouchstoneError(f"{path}: the directory {directory} does not exist")
    try:
        fd, tmp_name = tempfile.mkstemp(prefix=f".{path.stem}.", suffix=path.suffix,
                                        dir=directory)
    except OSError as exc:
        raise TouchstoneError(f"{path}: cannot write ({exc.strerror or exc})") from None
    tmp = Path(tmp_name)
    try:
        with os.fdopen(fd, "w", encoding="ascii", newline="\n") as fh:
            fh.write(text)
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give the usual permissions
        back = read_touchstone(tmp)
        if back.n_ports != n or not np.allclose(back.s, s, rtol=1e-9, atol=1e-12):
            raise TouchstoneError(f"{path}: the written file does not read back the same")
        os.replace(tmp, path)
    except OSError as exc:
        raise TouchstoneError(f"{path}: cannot write ({exc.strerror or exc})") from None
    finally:
        if tmp.exists():
            tmp.unlink()
    return path


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask
