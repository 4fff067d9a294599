"""Import Touchstone results (measurements, other simulators) as points of a study.

``filamant import STUDY.toml FILES|DIR --params FILE.csv``: the CSV maps each file name to its
parameter values. Its header is ``file`` followed by every parameter of the study's ``[space]``
(dotted names, config units); each row names one file (its base name) and gives the values::

    file,antenna.conductivity_s_per_m,antenna.length_mm,antenna.width_mm
    drawer_a.s1p,2000,148.5,2.0

Everything is validated before anything is written — the CSV (header, each line's values
against the study's space), every Touchstone file (read and evaluated with
``sweeps.touchstone.evaluate_touchstone`` at the study's target frequency, feed reference
impedance and switch loads) and duplicates — and then all points go into the store in one
transaction, or none. Each error names the file and, for the CSV, the line.

An imported point has ``source = "touchstone"``; its id hashes the parameters, the study's plan
and the SHA-256 of the file, so re-importing the same file is refused and a second measurement
of the same design is a separate point. Metrics that need currents or fields (efficiency, gain,
and what depends on them) are null with their reason.
"""

from __future__ import annotations

import csv
import hashlib
import logging
import math
import os
import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from studies.api import open_study
from studies.context import StudyContext
from studies.lease import Lease
from studies.points import Point, Record
from studies.space import Parameter
from studies.store import Store
from sweeps.errors import ConfigError, StoreError, TouchstoneError

__all__ = ["ImportSummary", "import_touchstone", "touchstone_files", "read_params_csv"]

logger = logging.getLogger(__name__)

_TOUCHSTONE = re.compile(r"\.s\d+p$", re.IGNORECASE)


@dataclass
class ImportSummary:
    """What :func:`import_touchstone` stored."""

    study: str
    store: str
    imported: int
    point_ids: list[str]
    created: bool

    def as_dict(self) -> dict[str, Any]:
        return {"study": self.study, "store": self.store, "imported": self.imported,
                "point_ids": self.point_ids, "created": self.created}


def touchstone_files(sources: Sequence[str | os.PathLike[str]]) -> list[Path]:
    """The Touchstone files named by ``sources`` (files, or directories of ``*.sNp`` files)."""
    out: list[Path] = []
    for s in sources:
        p = Path(s)
        if p.is_dir():
            found = sorted(f for f in p.iterdir() if f.is_file() and _TOUCHSTONE.search(f.name))
            if not found:
                raise ConfigError(f"{p}: no Touchstone files (*.s1p, *.s2p, ...) in this "
                                  "directory")
            out += found
        elif p.is_file():
            out.append(p)
        else:
            raise ConfigError(f"{p}: no such file or directory")
    names = [f.name for f in out]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise ConfigError(f"{dup[0]}: given twice (file names must be unique, the CSV maps "
                          "names to parameters)")
    return out


def _parse_value(p: Parameter, text: str, where: str) -> Any:
    text = text.strip()
    if text == "":
        raise ConfigError(f"{where}: {p.name} is empty")
    if p.kind == "choice":
        for v in p.values:
            if str(v) == text:
                return v
            if isinstance(v, int | float) and not isinstance(v, bool):
                try:
                    if float(text) == float(v):
                        return v
                except ValueError:
                    pass
        raise ConfigError(f"{where}: {p.name} = {text!r} is not one of the study's values "
                          f"({p.describe()})")
    try:
        x = float(text)
    except ValueError:
        raise ConfigError(f"{where}: {p.name} = {text!r} is not a number") from None
    if not math.isfinite(x):
        raise ConfigError(f"{where}: {p.name} = {text!r} must be finite")
    if p.integer:
        if x != round(x):
            raise ConfigError(f"{where}: {p.name} = {text!r} must be a whole number")
        return int(round(x))
    return x


def read_params_csv(path: str | os.PathLike[str], ctx: StudyContext) -> dict[str, tuple[int, dict]]:
    """Read the parameter CSV: ``{file name: (line, params)}``, validated against the space."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except OSError as exc:
        raise ConfigError(f"--params {path}: cannot read ({exc.strerror or exc})") from None
    except UnicodeDecodeError:
        raise ConfigError(f"--params {path}: not a UTF-8 text file") from None
    rows = list(csv.reader(text.splitlines()))
    if not rows or not any(c.strip() for c in rows[0]):
        raise ConfigError(f"{path}: line 1: the header is missing (file, then the parameters)")
    header = [c.strip() for c in rows[0]]
    if "file" not in header:
        raise ConfigError(f"{path}: line 1: no 'file' column (got {', '.join(header)})")
    names = ctx.space.names
    unknown = [c for c in header if c != "file" and c not in names]
    if unknown:
        raise ConfigError(f"{path}: line 1: column {unknown[0]!r} is not a parameter of study "
                          f"{ctx.name!r} (its parameters: {', '.join(names) or 'none'})")
    missing = [n for n in names if n not in header]
    if missing:
        raise ConfigError(f"{path}: line 1: missing column(s) {', '.join(missing)}")
    dup = sorted({c for c in header if header.count(c) > 1})
    if dup:
        raise ConfigError(f"{path}: line 1: column {dup[0]!r} appears twice")
    out: dict[str, tuple[int, dict]] = {}
    for lineno, row in enumerate(rows[1:], start=2):
        if not any(c.strip() for c in row):
            continue
        where = f"{path}: line {lineno}"
        if len(row) != len(header):
            raise ConfigError(f"{where}: {len(row)} value(s) for {len(header)} column(s)")
        cells = dict(zip(header, row, strict=True))
        fname = Path(cells["file"].strip()).name
        if not fname:
            raise ConfigError(f"{where}: file is empty")
        if fname in out:
            raise ConfigError(f"{where}: {fname} is already on line {out[fname][0]}")
        params = {n: _parse_value(ctx.space[n], cells[n], where) for n in names}
        out[fname] = (lineno, ctx.space.validate(params, where))
    if not out:
        raise ConfigError(f"{path}: no data lines after the header")
    return out


def _record(ctx: StudyContext, path: Path, params: dict[str, Any], port: int) -> Record:
    from studies.designio import design_from
    from sweeps.touchstone import evaluate_touchstone, read_touchstone

    design, band, reader = design_from(ctx.study, params)
    data = read_touchstone(path)
    ms = evaluate_touchstone(path, port, target_hz=band.target_hz, z0_ohm=design.z0_ohm,
                             switch=design.switch, reader=reader)
    with np.errstate(all="ignore"):
        z = np.asarray(data.network().z, dtype=complex)
    if not np.all(np.isfinite(z)):
        raise TouchstoneError(f"{path}: the impedance matrix is infinite at some frequency "
                              "(an open circuit); it cannot be stored as Z")
    return Record(point_id="", ok=True, metrics=dict(ms.values), reasons=dict(ms.reasons),
                  f_hz=np.asarray(data.f_hz, dtype=float), z=z,
                  z0_ohm=np.asarray(data.z0_ohm, dtype=float), worker="import")


def import_touchstone(ctx: StudyContext, sources: Sequence[str | os.PathLike[str]],
                      params_csv: str | os.PathLike[str], *, port: int = 1) -> ImportSummary:
    """Import Touchstone files as points of the study, all or nothing.

    Parameters
    ----------
    ctx : StudyContext
    sources : sequence of path-like
        Files or directories of ``*.sNp`` files.
    params_csv : path-like
        The CSV mapping file names to parameter values.
    port : int
        The antenna port of multi-port files (1-based).

    Returns
    -------
    ImportSummary

    Raises
    ------
    ConfigError, TouchstoneError
        Naming the file (and CSV line); nothing is imported.
    StoreError
        A file already imported, a changed config or a live run; nothing is imported.
    """
    files = touchstone_files(sources)
    table = read_params_csv(params_csv, ctx)
    given = {f.name for f in files}
    for fname, (lineno, _) in table.items():
        if fname not in given:
            raise ConfigError(f"{params_csv}: line {lineno}: {fname} is not among the files "
                              "given to import")
    points: list[Point] = []
    records: list[Record] = []
    for f in files:
        if f.name not in table:
            raise ConfigError(f"{f}: no line for {f.name} in {params_csv}")
        lineno, params = table[f.name]
        try:
            rec = _record(ctx, f, params, port)
        except ConfigError as exc:
            raise ConfigError(f"{params_csv}: line {lineno}: {exc}") from None
        sha = hashlib.sha256(f.read_bytes()).hexdigest()
        rec.point_id = ctx.point_id(params, touchstone_sha256=sha)
        if rec.point_id in {p.point_id for p in points}:
            raise ConfigError(f"{f}: the same data and parameters as another file given")
        points.append(Point(rec.point_id, params, 0, "touchstone"))
        records.append(rec)
    with Store(ctx.store_url) as store:
        with Lease.acquire(store, ctx.name, command="import") as lease:
            created, _ = open_study(store, ctx, lease)
            have = {p.point_id: p for p in store.points(ctx.name)}
            for f, p in zip(files, points, strict=True):
                if p.point_id in have:
                    raise StoreError(f"{f}: already imported into study {ctx.name!r} (point "
                                     f"{p.point_id}); nothing was imported")
            start = store.next_seq(ctx.name)
            points = [Point(p.point_id, p.params, start + i, p.source)
                      for i, p in enumerate(points)]
            store.write_batch(ctx.name, records, owner=lease.owner, new_points=points)
        logger.info("imported %d Touchstone result(s) into study %r", len(points), ctx.name)
        return ImportSummary(study=ctx.name, store=store.display_url, imported=len(points),
                             point_ids=[p.point_id for p in points], created=created)
