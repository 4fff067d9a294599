"""Assemble a study's report: choose the best designs, draw every figure, write the page.

Each figure is one step; a figure that cannot be made for this study (no surrogate fitted yet,
one conductivity only, no finished design) becomes a note on the page saying why, never a
broken image. The PNGs are written beside the page; each file is written under a temporary
name and moved into place, and the page last, so an interrupted report never leaves a
half-written file (a PNG of an earlier report whose figure is now missing is removed).
"""

from __future__ import annotations

import logging
import os
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from studies.report.figures import (
    TITLES,
    FigureEntry,
    Response,
    Unavailable,
    impedance_figure,
    png_bytes,
    s11_figure,
    smith_figure,
)
from studies.report.select import Selection, best_designs
from studies.report.surrogate import SurrogateQuestions
from sweeps.errors import ConfigError, FilamantError

__all__ = ["Report", "build_report", "default_out_dir", "PAGE_NAME"]

logger = logging.getLogger(__name__)

#: File name of the page inside the output folder.
PAGE_NAME = "report.html"


@dataclass
class Report:
    """A written report.

    Attributes
    ----------
    page : Path
        The HTML page.
    out_dir : Path
    figures : list of FigureEntry
    selection : Selection
    elapsed_s : float
    """

    page: Path
    out_dir: Path
    figures: list[FigureEntry]
    selection: Selection
    elapsed_s: float

    @property
    def missing(self) -> dict[str, str]:
        """Figure key -> why it is not on the page."""
        return {f.key: f.reason or "" for f in self.figures if not f.available}

    def as_dict(self) -> dict[str, Any]:
        return {"page": str(self.page), "out_dir": str(self.out_dir),
                "figures": [f.key for f in self.figures if f.available],
                "missing": self.missing, "best": self.selection.point_ids,
                "rule": self.selection.rule, "elapsed_s": self.elapsed_s}


def default_out_dir(ctx: Any) -> Path:
    """``<config dir>/<study name>-report``."""
    return Path(ctx.study.source).resolve().parent / f"{ctx.name}-report"


def _label(row: pd.Series) -> str:
    return f"#{int(row['rank'])} {str(row['point_id'])[:8]}"


def _params(row: pd.Series, names: list[str]) -> dict[str, Any]:
    out = {}
    for n in names:
        v = row[n]
        out[n] = v.item() if isinstance(v, np.generic) else v
    return out


def _responses(ctx: Any, selection: Selection) -> list[Response]:
    from studies.store import Store

    ids = selection.point_ids
    if not ids:
        return []
    with Store(ctx.store_url, create=False) as store:
        stored = {pid: (f, z, z0) for pid, f, z, z0 in store.responses(ctx.name, ids)}
    out = []
    for _, row in selection.table.iterrows():
        pid = row["point_id"]
        if pid in stored:
            f, z, z0 = stored[pid]
            out.append(Response(int(row["rank"]), pid, _label(row), np.asarray(f, float),
                                np.asarray(z[:, 0, 0], complex), float(np.ravel(z0)[0])))
    return out


class _Steps:
    """The figure steps in page order; each returns ``(png bytes or Figure, data, caption)``."""

    def __init__(self, ctx: Any, table: pd.DataFrame, selection: Selection,
                 responses: list[Response], questions: SurrogateQuestions) -> None:
        self.ctx, self.table, self.selection = ctx, table, selection
        self.responses, self.questions = responses, questions
        self.study = ctx.study
        self.names = list(ctx.space.names)
        self.target_mhz = float(ctx.study.band.target_mhz)
        self._surrogate: Any = None
        self._surrogate_error: str | None = None
        self.surrogate_warnings: list[str] = []

    def _best(self) -> pd.Series:
        if self.selection.table.empty:
            raise Unavailable("no finished design to show")
        return self.selection.table.iloc[0]

    def _best_response(self) -> Response:
        if not self.responses or self.responses[0].rank != 1:
            raise Unavailable("the best design has no stored response")
        return self.responses[0]

    def surrogate(self) -> Any:
        from studies.report.surrogate import load_study_surrogate

        if self._surrogate is None and self._surrogate_error is None:
            try:
                self._surrogate, self.surrogate_warnings = load_study_surrogate(self.ctx)
            except Unavailable as exc:
                self._surrogate_error = str(exc)
        if self._surrogate_error is not None:
            raise Unavailable(self._surrogate_error)
        return self._surrogate

    def s11(self) -> tuple[Any, dict, str]:
        fig, data = s11_figure(self.responses, self.target_mhz)
        return fig, data, (f"|S11| of the best designs from their stored responses "
                           f"(reflection against {self.responses[0].z0_ohm:g} ohm); dashed: "
                           "-10 dB; dotted: the target frequency.")

    def smith(self) -> tuple[Any, dict, str]:
        fig, data = smith_figure(self.responses, self.target_mhz)
        return fig, data, ("S11 of the best designs over the band on the impedance Smith chart "
                           "(drawn by scikit-rf); the dots mark the sample nearest the target.")

    def impedance(self) -> tuple[Any, dict, str]:
        fig, data = impedance_figure(self.responses, self.target_mhz)
        return fig, data, ("Input resistance and reactance of the best designs; the reactance "
                           "crosses zero at resonance_mhz.")

    def pattern(self) -> tuple[Any, dict, str]:
        from studies.report.pattern import pattern_figure

        row = self._best()
        fig, data = pattern_figure(self.study, _params(row, self.names), _label(row))
        stored = row.get("gain_dbi")
        note = "" if stored is None or pd.isna(stored) else \
            f" The study stored gain_dbi = {float(stored):.2f} dBi for this design."
        where = ("the cuts are the principal planes of the coordinates of [antenna] wires"
                 if self.study.antenna.shape == "wires" else
                 "the trace lies along x in the xy plane, so for a dipole the yz plane is the "
                 "H-plane")
        return fig, data, ("Gain of the best design in the three principal planes at the "
                           "target, from one solver evaluation of its parameters (IEEE gain, "
                           f"filament loss included); {where}." + note)

    def efficiency_conductivity(self) -> tuple[Any, dict, str]:
        from studies.report.conductivity import efficiency_figure

        best = label = None
        if not self.selection.table.empty:
            row = self._best()
            best, label = _params(row, self.names), _label(row)
        fig, data, note = efficiency_figure(self.table, self.study, best, label or "")
        return fig, data, (note + "Radiation efficiency (radiated over accepted power) at the "
                           "target of every finished design against its filament's "
                           "conductivity (the spread at one conductivity comes from the other "
                           "parameters); the line is the best design's geometry solved over a "
                           "conductivity sweep.")

    def switch_loads(self) -> tuple[Any, dict, str]:
        from studies.report.loads import switch_figure

        row, resp = self._best(), self._best_response()
        gain = row.get("gain_dbi")
        gain = None if gain is None or pd.isna(gain) else float(gain)
        fig, data = switch_figure(self.study, _params(row, self.names), resp.f_hz, resp.zin,
                                  gain, self.target_mhz * 1e6, _label(row))
        at = data["at_design"]
        text = (f"Modulation factor |Gamma_closed - Gamma_open|^2/4 and differential RCS of "
                f"the best design against the closed contact's resistance and the open gap's "
                f"capacitance, from its stored input impedance at the target (no re-solve). "
                f"At its own loads (star): modulation factor {at['modulation_factor']:.3g}")
        if at["delta_rcs_dbsm"] is not None:
            text += f", differential RCS {at['delta_rcs_dbsm']:.2f} dBsm"
        else:
            text += "; no differential RCS (the design has no stored gain)"
        return fig, data, text + "."

    def _noted(self, result: tuple[bytes, dict, str]) -> tuple[bytes, dict, str]:
        png, data, caption = result
        if self.surrogate_warnings:
            caption += " Note: " + "; ".join(self.surrogate_warnings)
        return png, data, caption

    def tradeoff(self) -> tuple[bytes, dict, str]:
        from studies.report.surrogate import tradeoff_png

        return self._noted(tradeoff_png(self.surrogate(), self.study, self.questions))

    def sensitivity(self) -> tuple[bytes, dict, str]:
        from studies.report.surrogate import sensitivity_png

        sur = self.surrogate()
        best = None if self.selection.table.empty else _params(self._best(), self.names)
        return self._noted(sensitivity_png(sur, best))

    def yield_(self) -> tuple[bytes, dict, str]:
        from studies.report.surrogate import yield_png

        sur = self.surrogate()
        return self._noted(yield_png(sur, self.study, _params(self._best(), self.names),
                                     self.questions))

    def steps(self) -> list[tuple[str, Callable[[], tuple[Any, dict, str]]]]:
        return [("s11", self.s11), ("smith", self.smith), ("impedance", self.impedance),
                ("pattern", self.pattern),
                ("efficiency_conductivity", self.efficiency_conductivity),
                ("switch_loads", self.switch_loads), ("tradeoff", self.tradeoff),
                ("sensitivity", self.sensitivity), ("yield", self.yield_)]


def _draw(key: str, step: Callable[[], tuple[Any, dict, str]]) -> FigureEntry:
    entry = FigureEntry(key=key, title=TITLES[key])
    try:
        image, data, caption = step()
    except Unavailable as exc:
        entry.reason = str(exc)
        logger.info("report: %s not shown: %s", key, exc)
        return entry
    except ConfigError:  # bad input (a --objective, --spec ... of the user): exit 2
        raise
    except FilamantError as exc:  # e.g. the solver refuses the best design's geometry
        entry.reason = f"could not be computed: {exc}"
        logger.warning("report: %s: %s", key, exc)
        return entry
    entry.png = image if isinstance(image, bytes) else png_bytes(image)
    entry.data, entry.caption = data, caption
    return entry


def _write_atomic(path: Path, content: bytes) -> None:
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        tmp.write_bytes(content)
        os.replace(tmp, path)
    except OSError as exc:
        raise ConfigError(f"--out {path.parent}: cannot write {path.name} "
                          f"({exc.strerror or exc})") from None
    finally:
        tmp.unlink(missing_ok=True)


def _summary(ctx: Any, table: pd.DataFrame) -> dict[str, Any]:
    counts = table["status"].value_counts()
    b = ctx.study.band
    return {
        "config": str(Path(ctx.study.source).resolve()),
        "store": _display(ctx.store_url),
        "points": (f"{len(table)} planned: {int(counts.get('done', 0))} done, "
                   f"{int(counts.get('failed', 0))} failed, "
                   f"{int(counts.get('planned', 0))} still to run"),
        "band": f"{b.start_mhz:g}-{b.stop_mhz:g} MHz, {b.points} frequencies, target "
                f"{b.target_mhz:g} MHz",
        "parameters": ", ".join(ctx.space.names),
        "generated": time.strftime("%Y-%m-%d %H:%M:%S %Z"),
    }


def _display(url: str) -> str:
    from studies.store import display_url

    return display_url(url)


def build_report(ctx: Any, out_dir: str | os.PathLike[str] | None = None, *, best: int = 3,
                 questions: SurrogateQuestions | None = None,
                 progress: bool | None = None) -> Report:
    """Write the report of a study: ``report.html`` and one PNG per figure in ``out_dir``.

    Parameters
    ----------
    ctx : studies.context.StudyContext
        The loaded study (:func:`studies.api.load_context`).
    out_dir : path-like, optional
        Output folder (created); default :func:`default_out_dir`.
    best : int
        How many best designs the table and the band plots show.
    questions : SurrogateQuestions, optional
        Trade-off objectives and constraints, yield tolerances and specs (defaults in
        :mod:`studies.report.surrogate`).
    progress : bool, optional
        A progress bar on stderr (default: when stderr is a terminal).

    Returns
    -------
    Report

    Raises
    ------
    StoreError
        If the study has not been run.
    ConfigError
        If a question is invalid (an unknown metric in ``questions``) or the output folder
        cannot be written; nothing is written then.
    """
    from tqdm import tqdm

    from studies.api import table_of
    from studies.cautions import READ_RANGE_CAUTIONS
    from studies.report.html import render_page
    from sweeps.metrics import METRIC_UNITS

    t0 = time.perf_counter()
    table = table_of(ctx)
    out = Path(out_dir) if out_dir is not None else default_out_dir(ctx)
    if out.exists() and not out.is_dir():
        raise ConfigError(f"--out {out}: exists and is not a folder")
    selection = best_designs(table, count=best, optimize=ctx.study.optimize)
    responses = _responses(ctx, selection)
    questions = questions or SurrogateQuestions()
    runner = _Steps(ctx, table, selection, responses, questions)
    if any(vars(questions).values()):  # a bad question fails now, before any figure is drawn
        from studies.report.surrogate import check_questions

        try:
            sur = runner.surrogate()
        except Unavailable:
            pass  # no surrogate: the surrogate figures say why, the questions do not matter
        else:
            check_questions(sur, questions)
    steps = runner.steps()
    show = sys.stderr.isatty() if progress is None else progress
    figures = []
    with tqdm(steps, desc="report", unit="figure", file=sys.stderr, disable=not show,
              leave=False) as bar:
        for key, step in bar:
            bar.set_postfix_str(key)
            figures.append(_draw(key, step))
    page = render_page(study=ctx.name, summary=_summary(ctx, table), rule=selection.rule,
                       notes=selection.notes, table=selection.table,
                       parameters=list(ctx.space.names), units=METRIC_UNITS, figures=figures,
                       cautions=READ_RANGE_CAUTIONS)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ConfigError(f"--out {out}: cannot create the folder ({exc.strerror or exc})"
                          ) from None
    for f in figures:
        png = out / f"{f.key}.png"
        if f.png is not None:
            _write_atomic(png, f.png)
        else:
            png.unlink(missing_ok=True)
    path = out / PAGE_NAME
    _write_atomic(path, page.encode("utf-8"))
    logger.info("report of %s: %s", ctx.name, path)
    return Report(page=path, out_dir=out, figures=figures, selection=selection,
                  elapsed_s=time.perf_counter() - t0)
