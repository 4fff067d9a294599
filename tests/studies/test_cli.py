"""The ``filamant`` command line: verb registry, exit statuses, one-line errors, ``evaluate``.

Contract (DESIGN.md, "The user-facing contract"): ``--json`` prints one JSON object whose
top-level keys are the metric names; errors are one line on stderr naming the file, key or
value, exit status 2, no traceback unless ``--debug``.
"""

from __future__ import annotations

import importlib
import importlib.util
import json
import math
import os
import subprocess
import sys
from pathlib import Path

import pytest

from studies import cli
from studies.cautions import READ_RANGE_CAUTIONS, read_range_cautions
from studies.config import load_design
from studies.constants import METRIC_NAMES
from studies.designio import design_from
from studies.verbs import evaluate as evaluate_verb
from studies.verbs.common import format_number, is_touchstone_path
from sweeps.evaluate import evaluate

ROOT = Path(__file__).resolve().parents[2]
TAG = ROOT / "studies" / "examples" / "drawer_tag.toml"
EXTRA_KEYS = {"reasons", "target_mhz", "cautions"}


def run_cli(capsys, *argv: str) -> tuple[int, str, str]:
    code = cli.main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def one_error_line(err: str) -> str:
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("filamant: error: ")
    assert "Traceback" not in err
    return lines[0]


@pytest.fixture(scope="module")
def tag_json() -> dict:
    """One evaluation of the example design through the command line, shared by the tests."""
    import contextlib
    import io

    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        assert cli.main(["evaluate", str(TAG), "--json"]) == 0
    return json.loads(buf.getvalue())


# ---------------------------------------------------------------------------------- registry


def test_every_contract_verb_is_registered():
    assert set(cli.VERBS) >= {"evaluate", "run", "status", "export", "import", "fit", "ask",
                              "tradeoff", "yield", "report", "bench"}
    assert cli.verb_module_name("import") == "studies.verbs.import_"
    assert cli.verb_module_name("yield") == "studies.verbs.yield_"


@pytest.mark.parametrize("verb", list(cli.VERBS))
def test_verb_help_or_not_available(capsys, verb):
    """A verb with a module follows the verb contract; one without says so and exits 2."""
    name = cli.verb_module_name(verb)
    if importlib.util.find_spec(name) is None:
        code, out, err = run_cli(capsys, verb, "--help")
        assert code == 2 and out == ""
        assert f"'{verb}' is not available yet" in err.strip().splitlines()[-1]
        return
    module = importlib.import_module(name)
    assert callable(module.add_arguments) and callable(module.run)
    assert module.EXAMPLE.startswith(f"filamant {verb}")
    code, out, err = run_cli(capsys, verb, "--help")
    assert code == 0 and err == ""
    assert f"example:\n  {module.EXAMPLE}" in out


def test_verbs_are_imported_lazily():
    code = ("import sys, studies.cli as c; "
            "assert c.main(['--help']) == 0; "
            "print([m for m in sys.modules if m.startswith('studies.verbs.') or "
            "m.startswith('sweeps.mom') or m == 'scipy'])")
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env,
                         timeout=120)
    assert res.returncode == 0, res.stderr
    assert res.stdout.strip().splitlines()[-1] == "[]"


def test_top_level_usage(capsys):
    code, out, _ = run_cli(capsys, "--help")
    assert code == 0
    for verb in cli.VERBS:
        assert verb in out
    code, _, err = run_cli(capsys)
    assert code == 2 and err.strip().splitlines() == [
        "filamant: error: choose a verb (filamant --help lists them)"]
    code, _, err = run_cli(capsys, "evalute", "x.toml")
    assert code == 2
    assert err.strip().splitlines() == ["filamant: error: unknown verb 'evalute'; did you "
                                        "mean evaluate? (filamant --help lists the verbs)"]
    # argparse usage errors follow the same one-line style
    code, _, err = run_cli(capsys, "evaluate")
    assert code == 2 and len(err.strip().splitlines()) == 1
    assert err.startswith("filamant: error: filamant evaluate: ")
    code, out, _ = run_cli(capsys, "--version")
    assert code == 0 and out.startswith("filamant ")


# ------------------------------------------------------------------------- evaluate, output


def test_evaluate_help_shows_an_example(capsys):
    code, out, _ = run_cli(capsys, "evaluate", "--help")
    assert code == 0
    assert "example:\n  filamant evaluate " in out
    assert evaluate_verb.EXAMPLE in out


def test_evaluate_json_is_one_object_with_every_metric(tag_json):
    assert set(tag_json) == set(METRIC_NAMES) | EXTRA_KEYS
    assert tag_json["target_mhz"] == 915.0
    for name in METRIC_NAMES:
        value = tag_json[name]
        if value is None:
            assert tag_json["reasons"][name], name  # a null always says why
        else:
            assert isinstance(value, float) and math.isfinite(value)
            assert name not in tag_json["reasons"]
    # cautions are present exactly when a read range is
    assert bool(tag_json["cautions"]) == (tag_json["read_range_m"] is not None)


def test_evaluate_json_matches_the_python_api(tag_json):
    """The command prints what sweeps.evaluate computes for the same config (no rounding)."""
    design, band, _ = design_from(load_design(TAG))
    ev = evaluate(design, band)
    for name in ("resonance_mhz", "s11_db", "zin_re_ohm", "zin_im_ohm", "gain_dbi"):
        assert tag_json[name] == pytest.approx(ev.metrics.values[name], rel=1e-9)


def test_evaluate_json_prints_exactly_one_object(capsys):
    code, out, err = run_cli(capsys, "evaluate", str(TAG), "--json",
                             "--set", "antenna.length_mm=145", "--target-mhz", "900")
    assert code == 0
    decoder = json.JSONDecoder()
    obj, end = decoder.raw_decode(out)
    assert out[end:].strip() == ""  # nothing but the one object
    assert obj["target_mhz"] == 900.0


def test_evaluate_table_prints_every_metric(capsys, tag_json):
    code, out, err = run_cli(capsys, "evaluate", str(TAG))
    assert code == 0 and err == ""
    rows = {line.split()[0]: line for line in out.splitlines()
            if line.startswith("  ") and line.split()[0] in METRIC_NAMES}
    assert set(rows) == set(METRIC_NAMES)
    for name in METRIC_NAMES:
        value = tag_json[name]
        if value is None:
            assert tag_json["reasons"][name] in rows[name]
        else:
            assert format_number(value) in rows[name]
    assert ("Caution:" in out) == (tag_json["read_range_m"] is not None)
    assert out.count("47 CFR 15.247") <= 1  # the caution is printed once, below the table


def test_table_ends_with_the_caution_when_a_range_is_shown(capsys):
    values = {name: 1.0 for name in METRIC_NAMES}
    report = evaluate_verb.metrics_report(values, {}, 915.0)
    assert report["cautions"] == list(READ_RANGE_CAUTIONS)
    evaluate_verb._print_table("demo", report, {})
    out = capsys.readouterr().out
    tail = out.strip().splitlines()
    assert tail[-len(READ_RANGE_CAUTIONS) - 1] == "Caution:"
    assert "47 CFR 15.247" in out and "ETSI EN 302 208" in out
    assert "ICNIRP 2020" in out and "C95.1-2019" in out
    assert "medical or safety" in out
    values["read_range_m"] = None
    assert read_range_cautions(values) == []


def test_verbose_logs_go_to_stderr_only(capsys):
    code, out, err = run_cli(capsys, "evaluate", str(TAG), "--json", "-v")
    assert code == 0
    json.loads(out)
    assert "filamant: INFO: studies.verbs.evaluate: evaluating" in err
    code, out, err = run_cli(capsys, "evaluate", str(TAG), "--json")
    assert err == ""


# ----------------------------------------------------------------------------------- errors


def test_bad_input_is_one_line_and_exit_2(capsys, tmp_path):
    bad = tmp_path / "drawer.toml"
    bad.write_text(TAG.read_text().replace("width_mm = 3.0", "widht_mm = 3.0"))
    syntax = tmp_path / "syntax.toml"
    syntax.write_text("[antenna]\nshape = = 1\n")
    cases = [
        (["evaluate", str(tmp_path / "nope.toml")], "nope.toml: no such file"),
        (["evaluate", str(bad)], "antenna.widht_mm: unknown key; did you mean width_mm?"),
        (["evaluate", str(syntax)], "syntax.toml: line 2, column"),
        (["evaluate", str(TAG), "--set", "antenna.length_mm=-5"],
         "antenna.length_mm (from --set): must be > 0 (got -5)"),
        (["evaluate", str(TAG), "--set", "antenna.length_mm.x=1"],
         "antenna.length_mm is a value (150.0), not a table"),
        (["evaluate", str(TAG), "--set", "nonsense"], "expected section.key=value"),
        (["evaluate", str(TAG), "--port", "2"], "--port: applies to a Touchstone result only"),
        (["evaluate", str(TAG), "--set", "antenna.width_mm=40"], "too large for the thin-wire"),
    ]
    for argv, expected in cases:
        code, out, err = run_cli(capsys, *argv)
        assert code == 2, argv
        assert out == "", argv
        assert expected in one_error_line(err), (argv, err)


def test_usage_errors_exit_2(capsys):
    for argv in (["evaluate"], ["evaluate", str(TAG), "--port", "0"],
                 ["evaluate", str(TAG), "--target-mhz", "abc"], ["evaluate", str(TAG), "--bogus"]):
        code, out, err = run_cli(capsys, *argv)
        assert code == 2 and out == "", argv
        assert "error:" in err.strip().splitlines()[-1]


def test_debug_shows_the_traceback(capsys):
    code, _, err = run_cli(capsys, "evaluate", "nope.toml", "--debug")
    assert code == 2
    assert "Traceback" in err and "ConfigError" in err
    assert err.strip().splitlines()[-1] == "filamant: error: nope.toml: no such file"


def test_unexpected_errors_exit_1(capsys, monkeypatch):
    def broken(args):
        raise ZeroDivisionError("a bug")

    monkeypatch.setattr(evaluate_verb, "run", broken)
    code, out, err = run_cli(capsys, "evaluate", str(TAG))
    assert code == 1 and out == ""
    assert one_error_line(err) == ("filamant: error: ZeroDivisionError: a bug (run with --debug "
                                   "for the traceback)")
    code, _, err = run_cli(capsys, "evaluate", str(TAG), "--debug")
    assert code == 1 and "Traceback" in err


def test_touchstone_source_detection():
    assert is_touchstone_path("meas.s1p") and is_touchstone_path("x/Y.S2P")
    assert is_touchstone_path("a.s10p")
    assert not is_touchstone_path("drawer.toml") and not is_touchstone_path("s1p.toml")


def test_touchstone_source_rejects_design_keys(capsys, tmp_path):
    code, out, err = run_cli(capsys, "evaluate", str(tmp_path / "m.s1p"), "--set",
                             "antenna.length_mm=3")
    assert code == 2 and out == ""
    assert "--set antenna: does not apply to a Touchstone result" in one_error_line(err)
    code, out, err = run_cli(capsys, "evaluate", str(tmp_path / "m.s1p"), "--touchstone",
                             str(tmp_path / "x.s1p"))
    assert code == 2 and "is already a Touchstone result" in one_error_line(err)


# ------------------------------------------------------------------------ installed command


def test_installed_command_in_a_subprocess(tmp_path):
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    res = subprocess.run([sys.executable, "-m", "studies.cli", "evaluate", str(TAG), "--json"],
                         capture_output=True, text=True, env=env, timeout=300, cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    assert set(json.loads(res.stdout)) == set(METRIC_NAMES) | EXTRA_KEYS
    res = subprocess.run([sys.executable, "-m", "studies.cli", "evaluate", "missing.toml"],
                         capture_output=True, text=True, env=env, timeout=300, cwd=tmp_path)
    assert res.returncode == 2 and res.stdout == ""
    assert res.stderr.strip() == "filamant: error: missing.toml: no such file"


SHAPES = {
    "meander": 'shape = "meander"\nlength_mm = 100\nturns = 2\npitch_mm = 6\nheight_mm = 10\n',
    "folded": 'shape = "folded"\nlength_mm = 150\nspacing_mm = 10\n',
    "loop": 'shape = "loop"\ncircumference_mm = 300\nsides = 12\n',
    "wires": 'shape = "wires"\nfeed_point_mm = [0, 0, 0]\n'
             'wires = [{ points_mm = [[-75, 0, 0], [0, 0, 0], [75, 0, 0]] }]\n',
}


@pytest.mark.parametrize("shape", list(SHAPES))
def test_every_shape_evaluates_from_its_config_keys(capsys, tmp_path, shape):
    """The config keys of each shape reach its builder in sweeps.shapes (end to end)."""
    path = tmp_path / f"{shape}.toml"
    path.write_text(f"[antenna]\n{SHAPES[shape]}width_mm = 2\nthickness_mm = 0.4\n"
                    "conductivity_s_per_m = 3e4\n[band]\nstart_mhz = 800\nstop_mhz = 1000\n"
                    "points = 11\n")
    code, out, err = run_cli(capsys, "evaluate", str(path), "--json")
    assert code == 0, err
    obj = json.loads(out)
    assert obj["target_mhz"] == 900.0 and obj["zin_re_ohm"] > 0
