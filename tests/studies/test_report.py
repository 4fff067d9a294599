"""``filamant report``: the page renders with every figure, and the figures plot the right numbers.

External checks, each named beside its test:
- S11 of the band plots against scikit-rf's ``Network.from_z`` (a reference library), which
  draws the Smith chart, and against ``(Z - Z0)/(Z + Z0)`` (Pozar, *Microwave Engineering*,
  4th ed., eq. 2.35 — from memory).
- The switch-load map at the design's own loads against the metrics the study stored through
  ``sweeps.metrics`` (a second route through the code: stored Zin spline vs. solver run), and
  ``|Gamma| <= 1`` for passive loads bounding the modulation factor by 1 (Kurokawa 1965).
- The pattern of a straight dipole: omnidirectional in its H-plane, nulls along its axis in
  the E-planes, and a peak directivity between the short dipole's 1.5 (1.76 dBi) and a bit
  above the half-wave dipole's 1.64 (2.15 dBi) (Balanis, *Antenna Theory*, 3rd ed., eqs. 4-32
  and 4-91 — from memory).
"""

from __future__ import annotations

import base64
import struct
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import skrf

from studies.api import load_context, run_study, table_of
from studies.cli import main
from studies.report import PAGE_NAME, TITLES, build_report
from studies.report.pattern import CUTS
from studies.report.select import best_designs, non_dominated_rows
from studies.sections import Optimize
from tests.studies.studies_store_support import write_study

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
SPACE = """\
length_mm = {min = 130, max = 170}
width_mm = {min = 1.0, max = 4.0}
conductivity_s_per_m = [3e4, 30.0]
"""
SURROGATE_FIGURES = ("tradeoff", "sensitivity", "yield")


class _Page(HTMLParser):
    """Collects the figures (key -> image src or missing text) and the cautions."""

    def __init__(self) -> None:
        super().__init__()
        self.images: dict[str, str] = {}
        self.missing: dict[str, str] = {}
        self.figures: list[str] = []
        self.cautions: list[str] = []
        self.table_rows = 0
        self._figure: str | None = None
        self._missing: str | None = None
        self._in_cautions = False
        self._li = False
        self._in_table = False

    def handle_starttag(self, tag: str, attrs: list) -> None:
        a = dict(attrs)
        if tag == "figure":
            self._figure = a["data-key"]
            self.figures.append(self._figure)
        elif tag == "img" and self._figure:
            self.images[self._figure] = a["src"]
        elif tag == "p" and "data-missing" in a:
            self._missing = a["data-missing"]
            self.missing[self._missing] = ""
        elif tag == "section" and a.get("id") == "cautions":
            self._in_cautions = True
        elif tag == "li" and self._in_cautions:
            self._li = True
            self.cautions.append("")
        elif tag == "table" and a.get("id") == "best-designs":
            self._in_table = True
        elif tag == "tr" and self._in_table:
            self.table_rows += 1

    def handle_endtag(self, tag: str) -> None:
        if tag == "figure":
            self._figure = None
        elif tag == "p":
            self._missing = None
        elif tag == "section":
            self._in_cautions = False
        elif tag == "li":
            self._li = False
        elif tag == "table":
            self._in_table = False

    def handle_data(self, data: str) -> None:
        if self._missing:
            self.missing[self._missing] += data
        if self._li:
            self.cautions[-1] += data


def parse_page(path: Path) -> _Page:
    page = _Page()
    page.feed(path.read_text(encoding="utf-8"))
    return page


def png_size(data: bytes) -> tuple[int, int]:
    """Width and height from the PNG's IHDR chunk (PNG spec, ISO/IEC 15948, section 11.2.2)."""
    assert data[:8] == PNG_SIGNATURE
    assert data[12:16] == b"IHDR"
    return struct.unpack(">II", data[16:24])


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    cfg = write_study(tmp_path_factory.mktemp("report"), name="drawer_report", points=8,
                      workers=1, space=SPACE)
    summary = run_study(cfg, progress=False)
    assert summary.done == 8
    return cfg


@pytest.fixture(scope="module")
def report(study):
    out = study.parent / "out"
    out.mkdir()
    (out / "tradeoff.png").write_bytes(b"stale")  # from an earlier report: must go if missing
    return build_report(load_context(study), out, best=3, progress=False)


def surrogate_available() -> bool:
    import importlib.util

    return importlib.util.find_spec("surrogates.store") is not None


def test_page_has_every_figure_and_the_cautions(report):
    from studies.cautions import READ_RANGE_CAUTIONS

    page = parse_page(report.page)
    assert report.page.name == PAGE_NAME
    assert page.figures == list(TITLES)  # every figure, in order, once
    expected = [k for k in TITLES if k not in SURROGATE_FIGURES]
    assert set(expected) <= set(page.images), page.missing
    for key in TITLES:
        png_file = report.out_dir / f"{key}.png"
        if key in page.images:
            src = page.images[key]
            assert src.startswith("data:image/png;base64,")  # embedded, no network or file
            data = base64.b64decode(src.split(",", 1)[1], validate=True)
            width, height = png_size(data)
            assert width >= 300 and height >= 250, (key, width, height)
            assert len(data) > 10_000, key  # a drawn figure, not an empty canvas
            assert png_file.read_bytes() == data
        else:  # a figure that cannot be made says why, and leaves no (stale) PNG behind
            assert page.missing[key].strip().startswith("Not shown:"), key
            assert len(page.missing[key]) > 20
            assert not png_file.exists()
    assert page.cautions == list(READ_RANGE_CAUTIONS)
    assert page.table_rows == 1 + 3  # header and the three best designs
    assert "http://" not in report.page.read_text() and "https://" not in \
        report.page.read_text()


def test_surrogate_figures_say_why_without_a_surrogate(report):
    missing = report.missing
    for key in SURROGATE_FIGURES:
        assert key in missing
        if surrogate_available():
            assert "filamant fit" in missing[key]
        else:
            assert "not available" in missing[key]


def test_s11_and_smith_agree_with_scikit_rf(report, study):
    ctx = load_context(study)
    from studies.store import Store

    figs = {f.key: f for f in report.figures}
    ids = report.selection.point_ids
    assert list(figs["s11"].data) == ids
    with Store(ctx.store_url, create=False) as store:
        stored = {pid: (f, z, z0) for pid, f, z, z0 in store.responses(ctx.name, ids)}
    for pid in ids:
        f, z, z0 = stored[pid]
        net = skrf.Network.from_z(z, frequency=skrf.Frequency.from_f(f, unit="hz"), z0=z0[0])
        s_ref = net.s[:, 0, 0]
        np.testing.assert_allclose(figs["smith"].data[pid]["s11"], s_ref, rtol=1e-12,
                                   atol=1e-14)
        zin = z[:, 0, 0]
        pozar = (zin - z0[0]) / (zin + z0[0])
        np.testing.assert_allclose(figs["s11"].data[pid]["s11_db"],
                                   20 * np.log10(np.abs(pozar)), rtol=1e-12)
        np.testing.assert_allclose(figs["impedance"].data[pid]["x_ohm"], zin.imag)


def test_switch_map_matches_the_stored_metrics(report):
    fig = {f.key: f for f in report.figures}["switch_loads"]
    best = report.selection.table.iloc[0]
    at = fig.data["at_design"]
    # stored: sweeps.metrics through the solver run; here: the stored Zin at the target
    assert at["modulation_factor"] == pytest.approx(best["modulation_factor"], rel=1e-9)
    assert at["delta_rcs_dbsm"] == pytest.approx(best["delta_rcs_dbsm"], abs=1e-9)
    mod = fig.data["modulation_factor"]
    assert mod.shape == (len(fig.data["closed_r_ohm"]), len(fig.data["open_c_pf"]))
    assert np.all(mod >= 0) and np.all(mod <= 1 + 1e-12)  # |Gamma| <= 1, passive loads
    # the grid's orientation: rows are closed resistances, columns open capacitances; each
    # cell written out from Kurokawa's Gamma = (Z_L - Za*)/(Z_L + Za) and series R-L-C loads
    za, w = fig.data["za_ohm"], 2 * np.pi * fig.data["target_hz"]
    closed, opened = fig.data["closed"], fig.data["open"]
    for i, j in ((0, 0), (10, 50), (80, 5)):
        zc = fig.data["closed_r_ohm"][i] + 1j * w * closed.l_h
        zo = opened.r_ohm + 1j * w * opened.l_h + 1 / (1j * w * fig.data["open_c_pf"][j] * 1e-12)
        gc, go = (zc - np.conj(za)) / (zc + za), (zo - np.conj(za)) / (zo + za)
        assert mod[i, j] == pytest.approx(abs(gc - go) ** 2 / 4, rel=1e-12)


def test_pattern_of_a_dipole(report):
    fig = {f.key: f for f in report.figures}["pattern"]
    cuts = fig.data["cuts"]
    assert set(cuts) == set(CUTS)
    ang = fig.data["angle_deg"]
    h_plane = cuts["yz plane (phi = 90 deg)"]
    assert np.ptp(h_plane) < 0.05  # omnidirectional around the axis (dB)
    best = report.selection.table.iloc[0]
    assert h_plane.max() == pytest.approx(best["gain_dbi"], abs=0.05)  # the stored peak gain
    xy = cuts["xy plane (theta = 90 deg)"]
    along_axis = np.isclose(ang % 180.0, 0.0)
    assert np.all(xy[along_axis] < xy.max() - 25.0)  # nulls along x
    xz = cuts["xz plane (phi = 0 deg)"]
    assert np.all(xz[np.isclose(ang % 180.0, 90.0)] < xz.max() - 25.0)
    assert 1.7 < fig.data["directivity_dbi"] < 2.4  # Balanis eqs. 4-32, 4-91 (from memory)


def test_efficiency_curve_passes_through_the_study(report, study):
    from studies.report.conductivity import efficiency_curve

    fig = {f.key: f for f in report.figures}["efficiency_conductivity"]
    curve = fig.data["curve"]
    assert np.all(np.diff(curve["efficiency"]) > 0)  # less loss, more efficiency
    assert set(fig.data["median"]) == {30.0, 3e4}
    best = report.selection.table.iloc[0]
    params = {k: best[k] for k in ("antenna.length_mm", "antenna.width_mm",
                                   "antenna.conductivity_s_per_m")}
    sigma = float(best["antenna.conductivity_s_per_m"])
    again = efficiency_curve(load_context(study).study, params, np.array([sigma]))
    # the curve's solve and the study's evaluation (efficiency at the target) agree
    assert again[0] == pytest.approx(best["efficiency"], rel=1e-9)


def test_best_rule_on_a_table():
    t = pd.DataFrame({
        "point_id": list("abcdef"),
        "status": ["done", "done", "done", "failed", "done", "done"],
        "resonance_mhz": [910.0, None, 905.0, None, 920.0, 930.0],
        "delta_rcs_dbsm": [-14.0, -5.0, -12.0, None, None, -20.0],
        "modulation_factor": [0.5, 0.9, 0.4, None, 0.8, 0.1],
    })
    sel = best_designs(t, count=4)
    # b is best by delta_rcs but does not resonate in band; e has no delta_rcs: it follows
    assert sel.point_ids == ["c", "a", "f", "e"]
    assert list(sel.table["rank"]) == [1, 2, 3, 4]
    none_resonate = t.assign(resonance_mhz=None)
    sel = best_designs(none_resonate, count=2)
    assert sel.point_ids == ["b", "c"] and "no finished design resonates" in sel.notes[0]
    assert best_designs(t.assign(status="failed")).table.empty


def test_best_rule_of_an_optimization():
    t = pd.DataFrame({
        "point_id": list("abcde"),
        "status": ["done"] * 5,
        "efficiency": [0.9, 0.8, 0.95, 0.7, 0.99],
        "bandwidth_mhz": [50.0, 70.0, 40.0, 80.0, 90.0],
        "resonance_mhz": [915.0, 912.0, 918.0, 910.0, 990.0],
    })
    one = Optimize(trials=5, objectives=({"metric": "efficiency", "goal": "max"},),
                   constraints=({"metric": "resonance_mhz", "min": 900.0, "max": 930.0},))
    assert best_designs(t, count=5, optimize=one).point_ids == ["c", "a", "b", "d"]
    two = Optimize(trials=5, algorithm="nsga2",
                   objectives=({"metric": "efficiency", "goal": "max"},
                               {"metric": "bandwidth_mhz", "goal": "max"}),
                   constraints=({"metric": "resonance_mhz", "max": 930.0},))
    # feasible a, b, c, d are all non-dominated (each trades efficiency for bandwidth)
    assert best_designs(t, count=5, optimize=two).point_ids == ["c", "a", "b", "d"]
    t2 = t.assign(bandwidth_mhz=[50.0, 40.0, 40.0, 80.0, 90.0])  # b is now dominated by a
    assert best_designs(t2, count=5, optimize=two).point_ids == ["c", "a", "d"]


def test_non_dominated_rows_by_hand():
    v = np.array([[1, 5], [2, 2], [3, 1], [3, 3], [1, 5], [4, 4]])
    assert non_dominated_rows(v).tolist() == [0, 1, 2, 4]


def test_report_verb_and_its_refusals(study, tmp_path, capsys):
    out = tmp_path / "rep"
    code = main(["report", str(study), "--out", str(out), "--best", "2", "--no-progress"])
    text, err = capsys.readouterr()
    assert code == 0, err
    assert f"wrote {out / PAGE_NAME}" in text
    assert parse_page(out / PAGE_NAME).table_rows == 1 + 2

    afile = tmp_path / "afile"
    afile.write_text("x")
    for argv, needle in (
        (["report", str(study), "--out", str(afile)], "exists and is not a folder"),
        (["report", str(tmp_path / "nope.toml")], "nope.toml: no such file"),
        (["report", str(study), "--spec", "resonance_mhz"], "--spec: expected key=value"),
    ):
        code = main(argv)
        _, err = capsys.readouterr()
        assert code == 2, argv
        assert err.startswith("filamant: error: ") and needle in err, (argv, err)
        assert err.count("\n") == 1
    code = main(["report", str(study), "--best", "0"])  # argparse: one line too
    _, err = capsys.readouterr()
    assert code == 2 and err.count("\n") == 1
    assert "argument --best: must be 1 to 10 (got 0)" in err


def test_report_of_a_study_not_run_is_refused(tmp_path, capsys):
    cfg = write_study(tmp_path, name="never_run", points=4, workers=1, space=SPACE)
    code = main(["report", str(cfg)])
    _, err = capsys.readouterr()
    assert code == 2
    assert err.startswith("filamant: error: ") and "filamant run" in err
    assert not (tmp_path / "never_run-report").exists()


def test_a_study_where_nothing_finished(tmp_path):
    # every gap is wider than the dipole: every point fails, the page still says why
    cfg = write_study(tmp_path, name="all_fail", points=4, workers=1,
                      space="length_mm = {min = 130, max = 170}\n",
                      extra="")
    text = cfg.read_text().replace("gap_mm = 1.0", "gap_mm = 400.0")
    cfg.write_text(text)
    summary = run_study(cfg, progress=False)
    assert summary.failed == 4
    rep = build_report(load_context(cfg), progress=False)
    assert rep.out_dir == tmp_path / "all_fail-report"
    page = parse_page(rep.page)
    assert page.images == {}
    assert set(page.missing) == set(TITLES)
    assert all(m.strip().startswith("Not shown:") for m in page.missing.values())
    assert page.cautions and page.table_rows == 0
    assert table_of(load_context(cfg))["status"].eq("failed").all()
