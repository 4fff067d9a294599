"""Touchstone files: read (validated, then converted through scikit-rf), evaluate, write.

Touchstone is an open standard (Touchstone File Format Specification 2.0, IBIS Open Forum 2009,
and 2.1). filamant reads version 1 files (``.sNp``, the port count from the extension) and
version 2 files (``[Version] 2.0`` / ``2.1``, any extension), with comments (``!``) anywhere,
frequency units Hz/kHz/MHz/GHz, data formats RI/MA/DB and S, Y or Z parameters (normalised to
the option line's ``R`` in version 1, not normalised in version 2, as the specification says).

Reading happens in two steps. :func:`read_touchstone` first parses the whole file itself and
checks it against the specification's rules (:mod:`sweeps.touchstone_syntax`), so a
malformed file gives one :class:`~sweeps.errors.TouchstoneError` ``"<file>:<line>: <what>"``:
empty file, unknown or
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

scikit-rf 2.2.0 scales version-1 normalised Y data by ``R`` where the specification means
``1/R``; :func:`read_touchstone` detects this once with a probe file and corrects it, so a
fixed scikit-rf is not corrected twice.
"""

from __future__ import annotations

import functools
import io
import logging
import os
import tempfile
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from sweeps.design import Reader, SwitchStates
from sweeps.errors import FilamantError, TouchstoneError, read_input_bytes
from sweeps.metrics import MetricSet, compute_metrics
from sweeps.touchstone_syntax import UNIT_NAMES, UNITS, canonical_text, parse_touchstone

if TYPE_CHECKING:  # scikit-rf is imported where it is used (it is slow to import)
    import skrf

__all__ = ["TouchstoneData", "evaluate_touchstone", "read_touchstone", "write_touchstone"]

log = logging.getLogger(__name__)


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

    def network(self) -> skrf.Network:
        """The data as a :class:`skrf.Network` (port impedances ``z0_ohm``)."""
        import skrf

        freq = skrf.Frequency.from_f(self.f_hz, unit="Hz")
        # z0 as (F, P): a (P,) vector is ambiguous to scikit-rf when F == P
        z0 = np.broadcast_to(self.z0_ohm, (len(self.f_hz), self.n_ports)).copy()
        return skrf.Network(frequency=freq, s=self.s, z0=z0)


def _read_text(path: Path) -> str:
    raw = read_input_bytes(path, str(path), "a Touchstone file", TouchstoneError)
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
    parsed = parse_touchstone(path, _read_text(path))
    assert parsed.n_ports is not None
    first_line = parsed.block_lines[0] if parsed.block_lines else 1
    n = parsed.n_ports
    text = canonical_text(parsed)
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
    expected_f = np.asarray(parsed.freqs) * UNITS[parsed.unit]
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
                              f"{UNIT_NAMES[parsed.unit]}")
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
