"""The HTML report of a study (``filamant report``): best designs, figures, cautions.

>>> from studies.api import load_context                      # doctest: +SKIP
>>> from studies.report import build_report                   # doctest: +SKIP
>>> rep = build_report(load_context("drawer_study.toml"))     # doctest: +SKIP
>>> rep.page                                                  # doctest: +SKIP
PosixPath('.../drawer_study-report/report.html')

Modules: :mod:`~studies.report.select` (which designs are "best"), :mod:`~studies.report.figures`
(figure record, band plots), :mod:`~studies.report.pattern`, :mod:`~studies.report.loads`,
:mod:`~studies.report.conductivity`, :mod:`~studies.report.surrogate` (trade-off, sensitivity,
yield), :mod:`~studies.report.html` (the page) and :mod:`~studies.report.build` (all of it).
"""

from studies.report.build import PAGE_NAME, Report, build_report, default_out_dir
from studies.report.figures import TITLES, FigureEntry
from studies.report.select import Selection, best_designs
from studies.report.surrogate import SurrogateQuestions

__all__ = ["PAGE_NAME", "TITLES", "FigureEntry", "Report", "Selection", "SurrogateQuestions",
           "best_designs", "build_report", "default_out_dir"]
