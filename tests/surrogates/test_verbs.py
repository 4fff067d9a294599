"""The fit, ask, tradeoff and yield verbs end to end on a small real study (run, then query)."""

from __future__ import annotations

import contextlib
import io
import json
import zipfile

import pytest

from studies import cli

STUDY = """
[study]
name = "cabinet_tag"

[antenna]
shape = "dipole"
length_mm = 150.0
width_mm = 2.5
thickness_mm = 0.4
conductivity_s_per_m = 2e4

[feed]
gap_mm = 1.0

[band]
start_mhz = 700.0
stop_mhz = 1200.0
points = {points}
target_mhz = 915.0

[space]
length_mm = {{ min = 130.0, max = 170.0 }}
width_mm = {{ min = 1.5, max = 4.0 }}
conductivity_s_per_m = {{ min = 1e3, max = 1e5, log = true }}

[sampler]
method = "sobol"
points = 32
seed = 1

[cluster]
workers = 1

[surrogate]
targets = ["resonance_mhz", "efficiency"]
model = "gp"
"""


def _cli(*argv):
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = cli.main([str(a) for a in argv])
    return code, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    d = tmp_path_factory.mktemp("verbs")
    cfg = d / "cabinet.toml"
    cfg.write_text(STUDY.format(points=51))
    code, _, err = _cli("run", cfg, "--no-progress")
    assert code == 0, err
    code, out, err = _cli("fit", cfg)
    assert code == 0, err
    return cfg, out


def test_fit_prints_cv_scores_and_saves_beside_the_config(fitted):
    cfg, out = fitted
    assert "resonance_mhz" in out and "CV R2" in out and "max |err|" in out
    path = cfg.parent / "cabinet_tag.surrogate.zip"
    assert f"saved {path}" in out
    with zipfile.ZipFile(path) as zf:
        assert "manifest.json" in zf.namelist()
    code, js, _ = _cli("fit", cfg, "--json", "--folds", "3")
    data = json.loads(js)
    assert code == 0 and set(data["targets"]) == {"resonance_mhz", "efficiency"}
    assert data["targets"]["resonance_mhz"]["cv_r2"] > 0.99
    assert data["targets"]["resonance_mhz"]["folds"] == 3


def test_ask_forward_json_contract(fitted):
    cfg, _ = fitted
    code, js, err = _cli("ask", cfg, "--set", "antenna.width_mm=3", "--json")
    assert code == 0, err
    data = json.loads(js)
    assert set(data) == {"resonance_mhz", "efficiency", "uncertainty", "warnings"}
    assert set(data["uncertainty"]) == {"resonance_mhz", "efficiency"}
    assert data["warnings"] == []
    assert 850 < data["resonance_mhz"] < 1000


def test_ask_flags_out_of_range_values(fitted):
    cfg, _ = fitted
    code, js, _ = _cli("ask", cfg, "--set", "antenna.length_mm=200", "--json")
    assert code == 0
    assert any("EXTRAPOLATED" in w for w in json.loads(js)["warnings"])
    code, out, _ = _cli("ask", cfg, "--set", "antenna.length_mm=200")
    assert "warning: antenna.length_mm=200 mm is outside the trained range" in out


def test_ask_inverse_verified_by_the_solver(fitted):
    cfg, _ = fitted
    code, js, err = _cli("ask", cfg, "--solve-for", "antenna.length_mm", "--target",
                         "resonance_mhz=915", "--set", "antenna.width_mm=3", "--verify",
                         "--json")
    assert code == 0, err
    data = json.loads(js)
    assert data["met"] and 130 <= data["antenna.length_mm"] <= 170
    assert abs(data["verify"]["resonance_mhz"] - 915.0) / 915.0 < 0.01
    code, out, _ = _cli("ask", cfg, "--solve-for", "antenna.length_mm", "--target",
                        "resonance_mhz=915")
    assert code == 0 and "(solved)" in out and "targets met" in out


def test_ask_errors_are_one_line_exit_2(fitted):
    cfg, _ = fitted
    for argv, needle in [
        (["--set", "antenna.thickness_mm=1"], "not a [space] parameter"),
        (["--solve-for", "antenna.length_mm"], "needs both --solve-for"),
        (["--solve-for", "antenna.length_mm", "--target", "resonance_mhz=x"], "not a number"),
        (["--solve-for", "antenna.length_mm", "--target", "q_factor=10"], "not a surrogate"),
    ]:
        code, out, err = _cli("ask", cfg, *argv)
        assert code == 2 and out == ""
        lines = err.strip().splitlines()
        assert len(lines) == 1 and needle in lines[0], err


def test_a_surrogate_of_another_config_is_refused(fitted, tmp_path):
    cfg, _ = fitted
    other = cfg.parent / "cabinet_other_band.toml"  # same study name, another band
    other.write_text(STUDY.format(points=41))
    try:
        code, out, err = _cli("ask", other, "--json")
    finally:
        other.unlink()
    assert code == 2 and out == ""
    assert "cabinet_tag.surrogate.zip: this surrogate was trained on another config" in err


def test_a_tampered_surrogate_is_refused(fitted, tmp_path):
    cfg, _ = fitted
    path = cfg.parent / "cabinet_tag.surrogate.zip"
    original = path.read_bytes()
    with zipfile.ZipFile(path) as zf:
        members = {n: zf.read(n) for n in zf.namelist()}
    man = json.loads(members["manifest.json"])
    man["features"][1]["max"] = 175.0
    members["manifest.json"] = json.dumps(man).encode()
    try:
        with zipfile.ZipFile(path, "w") as zf:
            for n, b in members.items():
                zf.writestr(n, b)
        code, _, err = _cli("ask", cfg)
    finally:
        path.write_bytes(original)
    assert code == 2 and "surrogate file refused: manifest.json was edited" in err


def test_tradeoff_writes_csv_and_png(fitted, tmp_path):
    cfg, _ = fitted
    out_csv = tmp_path / "front.csv"
    code, js, err = _cli("tradeoff", cfg, "--objective", "efficiency=max", "--objective",
                         "antenna.length_mm=min", "--constraint", "resonance_mhz=900:930",
                         "--out", out_csv, "--json")
    assert code == 0, err
    data = json.loads(js)
    assert data["candidates"] >= 100_000 and 0 < data["feasible"] < data["candidates"]
    assert data["front"] and all(900 <= r["resonance_mhz"] <= 930 for r in data["front"])
    assert out_csv.read_text().splitlines()[0].startswith("antenna.conductivity_s_per_m")
    assert (tmp_path / "front.png").read_bytes()[:4] == b"\x89PNG"
    code, _, err = _cli("tradeoff", cfg)
    assert code == 2 and "--objective" in err


def test_yield_reports_share_interval_and_worst_metric(fitted, tmp_path):
    cfg, _ = fitted
    code, js, err = _cli("yield", cfg, "--set", "antenna.length_mm=152", "--tolerance",
                         "antenna.width_mm=±0.3", "--tolerance", "antenna.length_mm=±1%",
                         "--spec", "resonance_mhz=910:930", "--spec", "efficiency=0.5:",
                         "--plot", tmp_path / "y.png", "--json")
    assert code == 0, err
    data = json.loads(js)
    assert 0 <= data["ci_low"] <= data["yield"] <= data["ci_high"] <= 1
    assert data["draws"] >= 10_000 and data["worst_metric"] in ("resonance_mhz", "efficiency",
                                                                None)
    assert data["nominal"]["antenna.length_mm"] == 152
    assert (tmp_path / "y.png").stat().st_size > 5_000
    code, out, _ = _cli("yield", cfg, "--tolerance", "antenna.width_mm=±0.3", "--spec",
                        "resonance_mhz=910:930")
    assert code == 0 and "Wilson interval" in out and "3 sigma, normal" in out
    code, _, err = _cli("yield", cfg, "--tolerance", "antenna.width_mm=±0.3")
    assert code == 2 and "--spec" in err


@pytest.mark.slow
def test_refinement_adds_planned_points_that_a_run_then_evaluates(tmp_path):
    """The --refine hook: N new points, stored as planned, evaluated by the next run."""
    from studies.api import load_context, run_context, table_of
    from studies.surrogate_api import add_refinement_points, fit_study

    cfg = tmp_path / "refine.toml"
    cfg.write_text(STUDY.format(points=51))
    ctx = load_context(cfg)
    run_context(ctx, progress=False)
    new = add_refinement_points(ctx, 4, seed=0)
    assert len(new) == 4
    t = table_of(ctx)
    assert (t["status"] == "planned").sum() == 4 and len(t) == 36
    s = run_context(ctx, progress=False)
    assert s.evaluated == 4 and s.done == 36
    res = fit_study(ctx)
    assert res.surrogate.meta["n_done"] == 36
