"""``make demo``'s step list: every step is a verb of the contract, and the demo runs end to end.

External checks on what the demo leaves behind: the Touchstone files are read back with
scikit-rf (a reference library) and the report page is parsed with ``html.parser``.
"""

from __future__ import annotations

import importlib.util
import tomllib

import pandas as pd
import pytest
import skrf

from studies import demo
from studies.cli import VERBS, build_parser, verb_module_name
from tests.studies.test_report import parse_page


def test_steps_cover_the_whole_job(tmp_path):
    cmds = demo.steps(tmp_path)
    verbs = [c[0] for c in cmds]
    assert set(verbs) <= set(VERBS)
    # run -> fit -> forward and inverse ask -> tradeoff -> yield -> export -> report
    order = ["run", "fit", "ask", "tradeoff", "yield", "export", "report"]
    assert [v for v in verbs if v in order] == ["run", "fit", "ask", "ask", "tradeoff",
                                                "yield", "export", "report"]
    asks = [c for c in cmds if c[0] == "ask"]
    assert "--solve-for" not in asks[0] and "--solve-for" in asks[1]  # forward, then inverse
    export = next(c for c in cmds if c[0] == "export")
    assert "--touchstone" in export and "--table" in export
    todo, left_out = demo.available_steps(tmp_path)
    for verb in left_out:
        assert importlib.util.find_spec(verb_module_name(verb)) is None
    for cmd in todo:  # every step the demo runs parses with its verb's own arguments
        module = importlib.import_module(verb_module_name(cmd[0]))
        args = build_parser(cmd[0], module).parse_args(cmd)
        assert args.verb == cmd[0]


@pytest.mark.slow
def test_demo_end_to_end(tmp_path, capsys):
    out = tmp_path / "demo-out"
    assert demo.main([str(out)]) == 0
    text = capsys.readouterr().out
    assert "demo finished" in text
    for name in demo.FILES:
        assert (out / name).read_text() == (demo.EXAMPLES / name).read_text()
    table = pd.read_csv(out / "drawer_study.csv")
    assert len(table) == 32 and (table["status"] == "done").all()
    files = sorted((out / "touchstone").glob("*.s1p"))
    assert len(files) == 32
    band = tomllib.loads((out / "drawer_study.toml").read_text())["band"]
    net = skrf.Network(str(files[0]))
    assert net.nports == 1 and len(net.f) == band["points"]
    assert net.f[0] == pytest.approx(band["start_mhz"] * 1e6)
    assert net.f[-1] == pytest.approx(band["stop_mhz"] * 1e6)
    single = skrf.Network(str(out / "drawer_tag.s1p"))
    assert len(single.f) == tomllib.loads((out / "drawer_tag.toml").read_text())["band"]["points"]
    page = parse_page(out / "drawer_study-report" / "report.html")
    _, left_out = demo.available_steps(out)
    surrogate_figures = {"tradeoff", "sensitivity", "yield"}
    if "fit" in left_out:
        assert set(page.missing) == surrogate_figures
    else:  # with the surrogates in, the demo's report shows every figure
        assert page.missing == {}
    assert len(page.images) + len(page.missing) == 9
    assert page.cautions
