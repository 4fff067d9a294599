"""``filamant evaluate`` with Touchstone files: ``--touchstone`` export and ``.sNp`` sources.

The export is checked against scikit-rf, an outside reference library (STYLE.md): the file it
reads back must hold the solver's own impedances. A Touchstone source must give the same
S-parameter metrics as the design it was written from.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import skrf

from studies import cli
from studies.config import load_design
from studies.constants import METRIC_NAMES
from studies.designio import design_from
from sweeps.evaluate import evaluate

ROOT = Path(__file__).resolve().parents[2]
TAG = ROOT / "studies" / "examples" / "drawer_tag.toml"

#: Metrics that need only the port impedance (identical from the design or its Touchstone file).
S_PARAMETER_METRICS = ("resonance_mhz", "match_mhz", "s11_db", "bandwidth_mhz",
                       "fractional_bandwidth", "q_factor", "zin_re_ohm", "zin_im_ohm",
                       "gamma_closed", "gamma_open", "modulation_depth", "modulation_factor")


def run_cli(capsys, *argv: str) -> tuple[int, str, str]:
    code = cli.main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture(scope="module")
def exported(tmp_path_factory) -> tuple[Path, dict]:
    """The example design evaluated once, its result written as a Touchstone file."""
    import contextlib
    import io

    path = tmp_path_factory.mktemp("ts") / "tag.s1p"
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = cli.main(["evaluate", str(TAG), "--json", "--touchstone", str(path)])
    assert code == 0, err.getvalue()
    assert f"wrote {path}" in err.getvalue()
    return path, json.loads(out.getvalue())


def test_export_reads_back_through_scikit_rf(exported):
    path, _ = exported
    config = load_design(TAG)
    design, band, _ = design_from(config)
    ev = evaluate(design, band)
    net = skrf.Network(str(path))
    assert np.allclose(net.f, ev.f_hz, rtol=1e-12)
    assert np.allclose(net.z0, config.feed.z0_ohm)
    # S referred to z0 = 50 ohm, back to Z: the solver's impedance (written with full precision)
    assert np.allclose(net.z[:, 0, 0], ev.z[:, 0, 0], rtol=1e-9)
    text = path.read_text()
    for line in ("!antenna.length_mm = 150.0", "!antenna.width_mm = 3.0",
                 "!antenna.conductivity_s_per_m = 30000.0", "!switch.closed.r_ohm = 20.0",
                 "!band.target_mhz = 915.0"):
        assert line in text


def test_touchstone_source_matches_the_design(capsys, exported):
    path, from_design = exported
    code, out, err = run_cli(capsys, "evaluate", str(path), "--json", "--target-mhz", "915")
    assert code == 0, err
    from_file = json.loads(out)
    assert set(from_file) == set(METRIC_NAMES) | {"reasons", "target_mhz", "cautions"}
    assert from_file["target_mhz"] == 915.0
    for name in S_PARAMETER_METRICS:
        assert from_design[name] is not None, name
        assert from_file[name] == pytest.approx(from_design[name], rel=1e-6, abs=1e-9), name
    for name in ("efficiency", "gain_dbi"):
        assert from_file[name] is None and from_file["reasons"][name]
    assert from_file["read_range_m"] is None and from_file["cautions"] == []


def test_touchstone_source_defaults_and_switch_overrides(capsys, exported):
    path, _ = exported
    code, out, _ = run_cli(capsys, "evaluate", str(path), "--json")
    assert code == 0
    base = json.loads(out)
    assert base["target_mhz"] == pytest.approx(900.0)  # the middle of 800-1000 MHz
    code, out, _ = run_cli(capsys, "evaluate", str(path), "--json",
                           "--set", "switch.closed.r_ohm=200")
    assert code == 0
    assert json.loads(out)["gamma_closed"] != pytest.approx(base["gamma_closed"])
    code, out, _ = run_cli(capsys, "evaluate", str(path))
    assert code == 0 and "Touchstone result, port 1" in out
    assert "efficiency" in out and "needs currents" in out


def test_bad_touchstone_sources_exit_2(capsys, tmp_path, exported):
    path, _ = exported
    broken = tmp_path / "broken.s1p"
    broken.write_text("# MHz S RI R 50\n800 0.1 0.2\n900 0.1 abc\n")
    cases = [
        (["evaluate", str(tmp_path / "none.s1p")], "none.s1p"),
        (["evaluate", str(broken)], "broken.s1p"),
        (["evaluate", str(path), "--port", "2"], "port"),
        (["evaluate", str(path), "--target-mhz", "2000"], "outside"),
    ]
    for argv, expected in cases:
        code, out, err = run_cli(capsys, *argv)
        assert code == 2 and out == "", argv
        lines = err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("filamant: error: "), err
        assert expected in lines[0], (argv, err)
