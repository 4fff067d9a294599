"""Every verb explains itself, and every verb reports bad input the same way.

``filamant VERB --help`` exits 0 and shows the verb's ``EXAMPLE`` under ``example:``; a verb
whose module has not landed says so (exit 2). Bad input — a missing file, a config with an
unknown key — gives exactly one line ``filamant: error: ...`` naming the file (and the key),
exit status 2, no traceback, for every verb that reads a config.
"""

from __future__ import annotations

import importlib
import importlib.util
from pathlib import Path

import pytest

from studies.cli import VERBS, main, verb_module_name

EXAMPLES = Path(__file__).resolve().parents[2] / "studies" / "examples"


def available(verb: str) -> bool:
    return importlib.util.find_spec(verb_module_name(verb)) is not None


@pytest.mark.parametrize("verb", list(VERBS))
def test_verb_help_shows_an_example(verb, capsys):
    code = main([verb, "--help"])
    out, err = capsys.readouterr()
    if not available(verb):  # not landed yet: a clear refusal, never a traceback
        assert code == 2
        assert err.splitlines()[-1] == f"filamant: error: {verb!r} is not available yet in " \
                                       "this version"
        return
    module = importlib.import_module(verb_module_name(verb))
    assert code == 0, err
    assert out.startswith(f"usage: filamant {verb}")
    example = module.EXAMPLE
    assert example.startswith(f"filamant {verb}") or f"filamant {verb} " in example, example
    assert "\nexample:\n  " + example in out  # shown verbatim, not re-wrapped
    assert "--debug" in out and "--verbose" in out


def test_top_level_help_lists_every_verb(capsys):
    assert main(["--help"]) == 0
    out = capsys.readouterr().out
    for verb, text in VERBS.items():
        assert verb in out and text[:30] in out
    assert "filamant VERB --help" in out


# argv after the verb for each verb that reads a config: {study} is the config path; files the
# verb needs besides the config are created by the test so that the config is what fails
CONFIG_VERBS: dict[str, list[str]] = {
    "evaluate": ["{design}"],
    "run": ["{study}", "--no-progress"],
    "status": ["{study}"],
    "export": ["{study}", "--table", "{tmp}/t.csv"],
    "import": ["{study}", "{tmp}/ts", "--params", "{tmp}/params.csv"],
    "fit": ["{study}"],
    "ask": ["{study}", "--set", "antenna.length_mm=150"],
    "tradeoff": ["{study}", "--objective", "efficiency=max"],
    "yield": ["{study}", "--set", "antenna.length_mm=150", "--tolerance",
              "antenna.width_mm=±0.1", "--spec", "resonance_mhz=900:930"],
    "report": ["{study}", "--out", "{tmp}/rep"],
}


def _files(tmp: Path) -> None:
    (tmp / "ts").mkdir()
    (tmp / "ts" / "a.s1p").write_text("# MHz S RI R 50\n900 0.1 0.1\n910 0.1 0.2\n")
    (tmp / "params.csv").write_text("file,antenna.length_mm\na.s1p,150\n")


def _argv(verb: str, tmp: Path, study: Path, design: Path) -> list[str]:
    return [verb] + [a.format(study=study, design=design, tmp=tmp) for a in CONFIG_VERBS[verb]]


def _one_error_line(err: str) -> str:
    lines = err.splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("filamant: error: "), err
    assert "Traceback" not in err
    return lines[0]


@pytest.mark.parametrize("verb", list(CONFIG_VERBS))
def test_missing_config_file(verb, tmp_path, capsys):
    if not available(verb):
        pytest.skip(f"{verb} has not landed yet (its --help test checks the refusal)")
    _files(tmp_path)
    missing = tmp_path / "no_such_study.toml"
    code = main(_argv(verb, tmp_path, missing, missing))
    _, err = capsys.readouterr()
    assert code == 2
    line = _one_error_line(err)
    assert str(missing) in line and "no such file" in line
    assert sorted(p.name for p in tmp_path.iterdir()) == ["params.csv", "ts"]  # nothing made


@pytest.mark.parametrize("verb", list(CONFIG_VERBS))
def test_config_with_an_unknown_key(verb, tmp_path, capsys):
    if not available(verb):
        pytest.skip(f"{verb} has not landed yet (its --help test checks the refusal)")
    _files(tmp_path)
    bad = {}
    for name in ("drawer_study.toml", "drawer_tag.toml"):
        text = (EXAMPLES / name).read_text()
        assert "\nwidth_mm = 3.0" in text
        bad[name] = tmp_path / f"bad_{name}"
        bad[name].write_text(text.replace("\nwidth_mm = 3.0", "\nwidht_mm = 3.0", 1))
    before = sorted(p.name for p in tmp_path.iterdir())
    code = main(_argv(verb, tmp_path, bad["drawer_study.toml"], bad["drawer_tag.toml"]))
    _, err = capsys.readouterr()
    assert code == 2
    line = _one_error_line(err)
    assert "bad_drawer_" in line and "antenna.widht_mm: unknown key" in line
    assert "did you mean width_mm?" in line
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # no store, no output


def test_init_into_a_file_is_one_error_line(tmp_path, capsys):
    target = tmp_path / "a_file"
    target.write_text("not a folder")
    code = main(["init", str(target)])
    _, err = capsys.readouterr()
    assert code == 2
    assert str(target) in _one_error_line(err)


def test_bench_unknown_measurement_is_one_error_line(capsys):
    code = main(["bench", "--only", "no_such_measurement"])
    _, err = capsys.readouterr()
    assert code == 2
    assert "no_such_measurement" in _one_error_line(err)


def test_unknown_verb_suggests_the_nearest(capsys):
    code = main(["reprot", "x.toml"])
    _, err = capsys.readouterr()
    assert code == 2
    assert err.splitlines()[-1].startswith("filamant: error: unknown verb 'reprot'")
    assert "report" in err.splitlines()[-1]
