"""Export a study: its table (CSV or Parquet) or its stored responses as Touchstone files.

Nothing is re-solved: the table comes from the results, the Touchstone files from the stored
``(f_hz, z, z0_ohm)`` of each point. Every file is written to a temporary name beside its
target and moved into place, so an interrupted export never leaves a half-written file.
"""

from __future__ import annotations

import logging
import os
from pathlib import Path

import pandas as pd

from studies.api import table_of
from studies.context import StudyContext
from studies.store import Store
from sweeps.errors import ConfigError, FilamantError, StoreError

__all__ = ["export_table", "export_touchstone", "TABLE_SUFFIXES", "touchstone_comments",
           "check_table_path", "write_table"]

logger = logging.getLogger(__name__)

TABLE_SUFFIXES = (".csv", ".parquet")


def _atomic_target(path: Path) -> Path:
    return path.with_name(f".{path.name}.{os.getpid()}.tmp")


def export_table(ctx: StudyContext, path: str | os.PathLike[str]) -> tuple[Path, int]:
    """Write the study table (:func:`studies.api.table_of`) to ``path`` (.csv or .parquet).

    Returns ``(path, rows)``.

    Raises
    ------
    ConfigError
        For another suffix or a directory that does not exist.
    StoreError
        If the study has not been run.
    """
    path = check_table_path(path)
    df = table_of(ctx)
    write_table(df, path)
    return path, len(df)


def check_table_path(path: str | os.PathLike[str], option: str = "--table") -> Path:
    """``path`` as a table file to write: a .csv or .parquet name in an existing directory.

    Raises
    ------
    ConfigError
        Naming ``option`` and the path.
    """
    path = Path(path)
    if path.suffix.lower() not in TABLE_SUFFIXES:
        raise ConfigError(f"{option} {path}: the file must end in .csv or .parquet "
                          f"(got {path.suffix or 'no suffix'})")
    if not path.parent.is_dir():
        raise ConfigError(f"{option} {path}: directory {path.parent} does not exist")
    return path


def write_table(df: pd.DataFrame, path: str | os.PathLike[str], option: str = "--table"
                ) -> None:
    """Write ``df`` to ``path`` (.csv or .parquet by its suffix) through a temporary file moved
    into place, so an interrupted export never leaves a half-written file."""
    path = Path(path)
    tmp = _atomic_target(path)
    try:
        if path.suffix.lower() == ".csv":
            df.to_csv(tmp, index=False)
        else:
            _parquet_ready(df).to_parquet(tmp, index=False)
        os.replace(tmp, path)
    except OSError as exc:
        raise ConfigError(f"{option} {path}: cannot write ({exc.strerror or exc})") from None
    finally:
        tmp.unlink(missing_ok=True)


def _parquet_ready(df: pd.DataFrame) -> pd.DataFrame:
    """Columns of mixed Python types (a choice of numbers and words) become strings."""
    out = df.copy()
    for col in out.columns:
        if out[col].dtype == object:
            kinds = {type(v) for v in out[col] if v is not None}
            if len(kinds) > 1:
                out[col] = out[col].map(lambda v: None if v is None else str(v))
    return out


def touchstone_comments(study: str, point_id: str, params: dict, source: str,
                        solver_version: str | None) -> list[str]:
    """The comment lines of an exported point: study, point id, source and parameters."""
    lines = [f"filamant study {study}", f"point_id = {point_id}", f"source = {source}"]
    if solver_version:
        lines.append(f"solver_version = {solver_version}")
    lines += [f"{k} = {v}" for k, v in params.items()]
    return lines


def export_touchstone(ctx: StudyContext, directory: str | os.PathLike[str]) -> list[Path]:
    """Write one Touchstone file per stored response into ``directory`` (created if needed).

    File names are ``<point_id>.sNp``; S-parameters are referred to the stored reference
    impedance. If any file fails, the files written by this call are removed.

    Returns
    -------
    list of Path
    """
    from sweeps.touchstone import write_touchstone

    directory = Path(directory)
    if directory.exists() and not directory.is_dir():
        raise ConfigError(f"--touchstone {directory}: exists and is not a directory")
    with Store(ctx.store_url, create=False) as store:
        rec = store.study(ctx.name)
        if rec is None:
            raise StoreError(f"{store.display_url}: no study {ctx.name!r} yet; run it first")
        meta = {r["point_id"]: r for r in store.results(ctx.name)}
        directory.mkdir(parents=True, exist_ok=True)
        written: list[Path] = []
        try:
            for pid, f_hz, z, z0 in store.responses(ctx.name):
                m = meta[pid]
                target = directory / f"{pid}.s{z.shape[-1]}p"
                comments = touchstone_comments(ctx.name, pid, m["params"], m["source"],
                                               rec.solver_version)
                write_touchstone(target, f_hz, z, z0, comments)
                written.append(target)
        except (FilamantError, OSError) as exc:
            for p in written:
                p.unlink(missing_ok=True)
            if isinstance(exc, OSError):
                raise ConfigError(f"--touchstone {directory}: cannot write "
                                  f"({exc.strerror or exc})") from None
            raise
    logger.info("wrote %d Touchstone file(s) to %s", len(written), directory)
    return written
