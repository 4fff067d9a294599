"""``filamant import``: Touchstone results become points of a study, all or nothing.

The imported data are a series R-L-C written by scikit-rf (the reference library), so the
stored metrics can be checked against closed forms: the reactance of a series RLC vanishes at
f0 = 1/(2 pi sqrt(LC)) and its reflection against 50 ohm is (Z - 50)/(Z + 50) (Pozar,
*Microwave Engineering*, 4th ed., eqs. 6.4 and 2.35 — from memory).
"""

from __future__ import annotations

import hashlib
import json
import math
from pathlib import Path

import numpy as np
import pytest
import skrf

from studies.api import load_context, table_of
from studies.cli import main
from studies.store import Store
from tests.studies.studies_store_support import write_study

R, L = 40.0, 50e-9


def _rlc(path: Path, f0_hz: float) -> Path:
    f = np.linspace(800e6, 1050e6, 251)
    c = 1.0 / ((2 * math.pi * f0_hz) ** 2 * L)
    w = 2 * math.pi * f
    z = R + 1j * (w * L - 1.0 / (w * c))
    net = skrf.Network.from_z(z[:, None, None], frequency=skrf.Frequency.from_f(f, unit="Hz"),
                              z0=50.0)
    net.write_touchstone(str(path.with_suffix("")))
    return path


def _z(f_hz: float, f0_hz: float) -> complex:
    c = 1.0 / ((2 * math.pi * f0_hz) ** 2 * L)
    w = 2 * math.pi * f_hz
    return complex(R, w * L - 1.0 / (w * c))


@pytest.fixture
def setup(tmp_path):
    cfg = write_study(tmp_path, points=4)
    meas = tmp_path / "measured"
    meas.mkdir()
    _rlc(meas / "tag_a.s1p", 900e6)
    _rlc(meas / "tag_b.s1p", 930e6)
    csv = meas / "params.csv"
    csv.write_text("file,antenna.length_mm,antenna.width_mm,antenna.conductivity_s_per_m\n"
                   "tag_a.s1p,150,2.0,2000\n"
                   "tag_b.s1p,145.5,3,5000\n")
    return cfg, meas, csv


def _cli(capsys, *argv) -> tuple[int, str, str]:
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def _state(cfg: Path) -> tuple:
    db = cfg.parent / f"{cfg.stem}.db"
    if not db.exists():
        return (None,)
    with Store(f"sqlite:///{db}", create=False) as store:
        return (store.counts("drawer"), hashlib.sha256(db.read_bytes()).hexdigest())


def test_import_stores_points_with_closed_form_metrics(setup, capsys, tmp_path):
    cfg, meas, csv = setup
    code, out, err = _cli(capsys, "import", cfg, meas, "--params", csv, "--json")
    assert code == 0, err
    rep = json.loads(out)
    assert rep["imported"] == 2 and rep["created"]
    df = table_of(load_context(cfg))
    # the study was created with its plan (4 planned points) plus the two imported ones
    assert (df["status"] == "planned").sum() == 4
    imp = df[df["source"] == "touchstone"].set_index("antenna.length_mm")
    assert list(imp["status"]) == ["done", "done"]
    a, b = imp.loc[150.0], imp.loc[145.5]
    # resonance from the zero crossing of Im Z (linear interpolation on a 1 MHz grid)
    assert a["resonance_mhz"] == pytest.approx(900.0, abs=0.01)
    assert b["resonance_mhz"] == pytest.approx(930.0, abs=0.01)
    g = (_z(915e6, 900e6) - 50.0) / (_z(915e6, 900e6) + 50.0)
    assert a["s11_db"] == pytest.approx(20 * math.log10(abs(g)), abs=0.02)
    assert math.isnan(a["efficiency"]) and math.isnan(a["gain_dbi"])  # need currents / fields
    assert b["antenna.width_mm"] == 3.0 and b["antenna.conductivity_s_per_m"] == 5000.0

    # export re-writes the imported data (same S-parameters as the original files)
    out_dir = tmp_path / "again"
    assert _cli(capsys, "export", cfg, "--touchstone", out_dir)[0] == 0
    orig = skrf.Network(str(meas / "tag_a.s1p"))
    back = skrf.Network(str(out_dir / f"{imp.loc[150.0, 'point_id']}.s1p"))
    np.testing.assert_allclose(back.s, orig.s, rtol=1e-9, atol=1e-12)

    # importing the same files again is refused, nothing changes
    before = _state(cfg)
    code, _, err = _cli(capsys, "import", cfg, meas, "--params", csv)
    assert code == 2 and "already imported" in err and err.count("\n") == 1
    assert _state(cfg) == before


@pytest.mark.parametrize("csv_text, words", [
    ("file,antenna.length_mm,antenna.width_mm,antenna.lenght\n", ["line 1", "antenna.lenght"]),
    ("file,antenna.length_mm,antenna.width_mm\n", ["line 1", "conductivity"]),
    ("file,antenna.length_mm,antenna.width_mm,antenna.conductivity_s_per_m\n"
     "tag_a.s1p,150,2.0,2000\ntag_b.s1p,300,2.0,2000\n", ["line 3", "outside", "130..170"]),
    ("file,antenna.length_mm,antenna.width_mm,antenna.conductivity_s_per_m\n"
     "tag_a.s1p,150,2.0,2000\ntag_b.s1p,150,wide,2000\n", ["line 3", "not a number"]),
    ("file,antenna.length_mm,antenna.width_mm,antenna.conductivity_s_per_m\n"
     "tag_a.s1p,150,2.0,2000\n", ["tag_b.s1p", "no line"]),
    ("file,antenna.length_mm,antenna.width_mm,antenna.conductivity_s_per_m\n"
     "tag_a.s1p,150,2.0,2000\ntag_b.s1p,150,2.0,2000\ntag_c.s1p,150,2.0,2000\n",
     ["line 4", "tag_c.s1p", "not among"]),
])
def test_bad_params_name_file_and_line_nothing_imported(setup, capsys, csv_text, words):
    cfg, meas, csv = setup
    csv.write_text(csv_text)
    code, out, err = _cli(capsys, "import", cfg, meas, "--params", csv)
    assert code == 2 and out == "" and err.count("\n") == 1, err
    for w in words:
        assert w in err, err
    assert _state(cfg) == (None,)  # not even a store was created


def test_bad_touchstone_file_nothing_imported(setup, capsys):
    cfg, meas, csv = setup
    # an existing store with a run-free study: its bytes must not change
    assert _cli(capsys, "import", cfg, meas / "tag_a.s1p", "--params", _only_a(csv))[0] == 0
    before = _state(cfg)
    bad = meas / "tag_b.s1p"
    lines = bad.read_text().splitlines()
    lines[10] = "not a number at all"
    bad.write_text("\n".join(lines) + "\n")
    code, out, err = _cli(capsys, "import", cfg, meas / "tag_b.s1p", "--params", _only_b(csv))
    assert code == 2 and "tag_b.s1p" in err and err.count("\n") == 1, err
    assert _state(cfg) == before


def _only_a(csv: Path) -> Path:
    p = csv.with_name("a.csv")
    p.write_text(csv.read_text().splitlines()[0] + "\n" + csv.read_text().splitlines()[1] + "\n")
    return p


def _only_b(csv: Path) -> Path:
    p = csv.with_name("b.csv")
    p.write_text(csv.read_text().splitlines()[0] + "\n" + csv.read_text().splitlines()[2] + "\n")
    return p
