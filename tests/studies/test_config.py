"""The configuration layer: schema, one-line errors, overrides, [space], fingerprints.

The contract checked here is DESIGN.md's ("The user-facing contract"): key names with units,
one line naming the file and the key path, nothing evaluated as code.
"""

from __future__ import annotations

import json
import math
import textwrap
from pathlib import Path

import numpy as np
import pytest

from studies import sections as cfg
from studies.config import load_design, load_study
from studies.constants import METRIC_NAMES
from studies.designio import (
    dbm_to_w,
    design_from,
    reader_from,
    solver_settings,
    switch_states,
    w_to_dbm,
)
from sweeps.design import Reader, SwitchStates
from sweeps.errors import ConfigError, FilamantError
from sweeps.mom.solve import SolverSettings

EXAMPLES = Path(__file__).resolve().parents[2] / "studies" / "examples"

DESIGN = """
[antenna]
shape = "dipole"
length_mm = 150
width_mm = 3
thickness_mm = 0.4
conductivity_s_per_m = 3e4

[band]
start_mhz = 800
stop_mhz = 1000
points = 21
target_mhz = 915
"""

STUDY = DESIGN + """
[space]
length_mm = { min = 130, max = 170 }
feed.gap_mm = [0.5, 1.0]
switch.closed.r_ohm = { min = 5, max = 50, log = true }

[sampler]
method = "sobol"
points = 8
"""


def write(tmp_path: Path, text: str, name: str = "drawer.toml") -> Path:
    path = tmp_path / name
    path.write_text(textwrap.dedent(text))
    return path


def error(fn, *args, **kwargs) -> str:
    with pytest.raises(ConfigError) as info:
        fn(*args, **kwargs)
    msg = str(info.value)
    assert "\n" not in msg, "errors are one line"
    return msg


# --------------------------------------------------------------------------- examples, defaults


def test_examples_load():
    design = load_design(EXAMPLES / "drawer_tag.toml")
    assert design.antenna.shape == "dipole"
    assert design.antenna.width_mm == 3.0 and design.antenna.thickness_mm == 0.4
    assert design.band.target_mhz == 915.0
    study = load_study(EXAMPLES / "drawer_study.toml")
    names = [p.name for p in study.parameters]
    assert names == sorted(names)
    assert set(names) == {"antenna.length_mm", "antenna.width_mm",
                          "antenna.conductivity_s_per_m", "switch.closed.r_ohm"}
    assert study.parameter("antenna.conductivity_s_per_m").values == (3e4, 30.0)
    assert 32 <= study.sampler.points <= 64
    # a study file is also a design file
    assert load_design(EXAMPLES / "drawer_study.toml").antenna == study.antenna


def test_every_example_key_is_commented():
    """Every key line of the examples carries a comment, or its section has one above it."""
    for path in EXAMPLES.glob("*.toml"):
        lines = path.read_text().splitlines()
        for i, line in enumerate(lines):
            s = line.strip()
            if not s or s.startswith("#") or s.startswith("["):
                continue
            j = i - 1
            while j >= 0 and lines[j].strip() and not lines[j].strip().startswith("["):
                j -= 1
            block = lines[j + 1: i + 1]
            assert "#" in line or any(b.strip().startswith("#") for b in block), (path, line)


def test_study_defaults(tmp_path):
    study = load_study(write(tmp_path, STUDY, "my drawer.toml"))
    assert study.name == "my_drawer"
    assert study.study.store == f"sqlite:///{tmp_path.resolve() / 'my_drawer.db'}"
    assert study.feed.gap_mm == 0.0 and study.feed.z0_ohm == 50.0
    assert study.sampler.seed == 0
    assert study.optimize is None
    assert study.cluster.workers >= 1
    assert study.surrogate.model == "auto"


def test_relative_sqlite_store_is_beside_the_config(tmp_path):
    text = STUDY + '\n[study]\nstore = "sqlite:///sub/x.db"\n'
    study = load_study(write(tmp_path, text))
    assert study.study.store == f"sqlite:///{tmp_path.resolve() / 'sub' / 'x.db'}"
    url = "postgresql+psycopg2://u@127.0.0.1:5432/db"
    assert load_study(write(tmp_path, STUDY), [f"study.store='{url}'"]).study.store == url


def test_defaults_come_from_the_physics_layer():
    """Absent [switch]/[reader] convert back exactly to sweeps.design's own defaults."""
    states = switch_states(cfg.Switch())
    ref = SwitchStates()
    for mine, theirs in ((states.closed, ref.closed), (states.open, ref.open)):
        assert mine.r_ohm == pytest.approx(theirs.r_ohm, rel=1e-12)
        assert mine.l_h == pytest.approx(theirs.l_h, rel=1e-12, abs=1e-30)
        assert mine.c_f == pytest.approx(theirs.c_f, rel=1e-12) or math.isinf(theirs.c_f)
    reader, rref = reader_from(cfg.Reader()), Reader()
    assert reader.tx_power_w == pytest.approx(rref.tx_power_w, rel=1e-12)
    assert reader.sensitivity_w == pytest.approx(rref.sensitivity_w, rel=1e-12)
    assert reader.antenna_gain_dbi == rref.antenna_gain_dbi
    assert reader.cancellation_db == rref.cancellation_db


def test_dbm_conversion():
    # definition of the dBm: 0 dBm = 1 mW, 30 dBm = 1 W (common practice)
    assert dbm_to_w(0.0) == pytest.approx(1e-3)
    assert dbm_to_w(30.0) == pytest.approx(1.0)
    assert dbm_to_w(-80.0) == pytest.approx(1e-11)
    assert w_to_dbm(dbm_to_w(-36.14)) == pytest.approx(-36.14)


# ------------------------------------------------------------------------------------ errors


def test_unknown_key_with_suggestion(tmp_path):
    path = write(tmp_path, STUDY.replace("length_mm = { min", "lenght_mm = { min"))
    assert error(load_study, path) == (
        f"{path}: space.lenght_mm: unknown key; did you mean length_mm?")
    path = write(tmp_path, DESIGN.replace("width_mm = 3", "widht_mm = 3"))
    assert error(load_design, path) == f"{path}: antenna.widht_mm: unknown key; did you mean " \
                                       "width_mm?"
    path = write(tmp_path, DESIGN + "\n[switch]\nclosed = {r_ohm = 1, l_hn = 2}\n")
    assert error(load_design, path).endswith("switch.closed.l_hn: unknown key; did you mean "
                                             "l_nh?")
    path = write(tmp_path, DESIGN + "\n[redaer]\nx = 1\n")
    assert error(load_design, path).endswith("redaer: unknown section; did you mean reader?")
    path = write(tmp_path, DESIGN + "\n[feed]\nzz = 1\n")
    assert "feed.zz: unknown key; expected one of: feed_offset_mm, gap_mm, z0_ohm" in \
        error(load_design, path)


def test_bad_range_names_key_and_value(tmp_path):
    path = write(tmp_path, DESIGN.replace("length_mm = 150", "length_mm = -5"))
    assert error(load_design, path) == f"{path}: antenna.length_mm: must be > 0 (got -5)"
    path = write(tmp_path, DESIGN.replace("stop_mhz = 1000", "stop_mhz = 700"))
    assert error(load_design, path).endswith("band.stop_mhz: must be > start_mhz (got 700 <= "
                                             "800)")
    path = write(tmp_path, DESIGN.replace("target_mhz = 915", "target_mhz = 2450"))
    assert "band.target_mhz: must lie within the band 800-1000 MHz (got 2450)" in \
        error(load_design, path)
    path = write(tmp_path, DESIGN.replace("points = 21", "points = 100002"))
    assert "band.points: must be <= 100001 (got 100002)" in error(load_design, path)
    path = write(tmp_path, DESIGN.replace("points = 21", "points = 1"))
    assert "band.points: must be >= 2 (got 1)" in error(load_design, path)
    path = write(tmp_path, DESIGN.replace("length_mm = 150", "length_mm = inf"))
    assert "antenna.length_mm: must be a finite number (got inf)" in error(load_design, path)
    path = write(tmp_path, DESIGN.replace("3e4", "-1"))
    assert 'antenna.conductivity_s_per_m: must be > 0 S/m or "pec" (got -1)' in \
        error(load_design, path)


def test_wrong_types(tmp_path):
    path = write(tmp_path, DESIGN.replace("length_mm = 150", 'length_mm = "150"'))
    assert error(load_design, path).endswith('antenna.length_mm: must be a number (got "150")')
    path = write(tmp_path, DESIGN.replace("length_mm = 150", "length_mm = true"))
    assert error(load_design, path).endswith("antenna.length_mm: must be a number (got true)")
    path = write(tmp_path, DESIGN.replace("points = 21", "points = 21.5"))
    assert error(load_design, path).endswith("band.points: must be a whole number (got 21.5)")
    path = write(tmp_path, DESIGN.replace('"dipole"', '"dipol"'))
    assert "antenna.shape: must be one of 'dipole', 'meander'" in error(load_design, path)
    path = write(tmp_path, DESIGN + '\nfeed = 3\n')  # a key after [band] is band.feed
    assert error(load_design, path).endswith("band.feed: unknown key; expected one of: points, "
                                             "start_mhz, stop_mhz, target_mhz")
    path = write(tmp_path, 'feed = 3\n' + DESIGN)
    assert error(load_design, path).endswith("feed: must be a table [feed] (got 3)")
    path = write(tmp_path, DESIGN + "\n[switch]\nclosed = 20\n")
    assert error(load_design, path).endswith("switch.closed: must be a table (got 20)")


def test_missing_sections_and_keys(tmp_path):
    path = write(tmp_path, DESIGN.split("[band]")[0])
    assert error(load_design, path) == f"{path}: missing section [band]"
    path = write(tmp_path, DESIGN)
    assert error(load_study, path) == f"{path}: missing section [space]"
    path = write(tmp_path, DESIGN.replace('shape = "dipole"\n', ""))
    assert error(load_design, path).endswith("antenna.shape: required key missing")
    path = write(tmp_path, DESIGN.replace("thickness_mm = 0.4\n", ""))
    assert error(load_design, path).endswith("antenna.thickness_mm: required with width_mm (a "
                                             "flat trace needs both)")
    path = write(tmp_path, DESIGN.replace("width_mm = 3\nthickness_mm = 0.4\n", ""))
    assert "antenna.width_mm: missing cross-section" in error(load_design, path)


def test_toml_syntax_error_names_the_line(tmp_path):
    path = write(tmp_path, "[antenna]\nshape = \"dipole\"\nlength_mm = = 3\n")
    msg = error(load_design, path)
    assert msg.startswith(f"{path}: line 3, column ") and "invalid TOML" in msg
    path = write(tmp_path, "[band]\nstart_mhz = [1,\n")
    assert "invalid TOML" in error(load_design, path)


def test_missing_or_unreadable_file(tmp_path):
    assert error(load_design, tmp_path / "nope.toml") == f"{tmp_path / 'nope.toml'}: no such file"
    assert "is a directory" in error(load_study, tmp_path)
    bad = tmp_path / "bin.toml"
    bad.write_bytes(b"[antenna]\n\xff\xfe\n")
    assert error(load_design, bad) == f"{bad}: line 2: not UTF-8 text"


def test_errors_are_filamant_errors_for_the_cli(tmp_path):
    with pytest.raises(FilamantError):
        load_design(tmp_path / "nope.toml")


# --------------------------------------------------------------------------------- overrides


def test_overrides_numbers_words_tables(tmp_path):
    path = write(tmp_path, STUDY)
    study = load_study(path, [
        "antenna.width_mm=2",
        "antenna.conductivity_s_per_m=pec",
        "switch.open.c_pf=0.2",           # creates [switch] and its open table
        "space.length_mm={min = 140, max = 160}",
        "sampler.method=lhs",
        "study.name=drawer2",
    ])
    assert study.antenna.width_mm == 2.0
    assert study.antenna.conductivity_s_per_m == "pec"
    assert study.switch.open.c_pf == 0.2 and study.switch.open.r_ohm == 0.0
    assert study.switch.closed == cfg.Switch().closed  # the untouched state keeps its default
    spec = study.parameter("antenna.length_mm")
    assert (spec.min, spec.max) == (140.0, 160.0)
    assert study.sampler.method == "lhs" and study.name == "drawer2"


def test_nested_switch_overrides(tmp_path):
    path = write(tmp_path, DESIGN + "\n[switch]\nclosed = { r_ohm = 20, l_nh = 1 }\n")
    d = load_design(path, ["switch.closed.r_ohm=35", "switch.closed.c_pf=2"])
    assert (d.switch.closed.r_ohm, d.switch.closed.l_nh, d.switch.closed.c_pf) == (35, 1, 2)


def test_bad_override_paths(tmp_path):
    path = write(tmp_path, DESIGN)
    assert error(load_design, path, ["antenna.length_mm.x=3"]).endswith(
        "--set antenna.length_mm.x: antenna.length_mm is a value (150), not a table")
    assert error(load_design, path, ["antenna.lenght_mm=3"]).endswith(
        "antenna.lenght_mm (from --set): unknown key; did you mean length_mm?")
    assert error(load_design, path, ["length_mm=3"]).startswith(
        "--set length_mm: give a section and a key, e.g. antenna.length_mm")
    assert error(load_design, path, ["antenna.length_mm"]) == (
        "--set 'antenna.length_mm': expected section.key=value")
    assert error(load_design, path, ["antenna..x=1"]) == (
        "--set antenna..x: '' is not a valid key (letters, digits, '_' and '-' only)")
    assert "band.start_mhz (from --set): required key missing" in error(
        load_design, path, ["band={stop_mhz = 900}"])


def test_override_is_never_code(tmp_path):
    path = write(tmp_path, DESIGN)
    marker = tmp_path / "pwned"
    for value in (f"__import__('pathlib').Path('{marker}').touch()",
                  f"exec(\"open('{marker}','w')\")"):
        msg = error(load_design, path, [f"antenna.length_mm={value}"])
        assert "is not a TOML value" in msg
    assert not marker.exists()
    # a bare word is a string, and a string is not a number
    assert error(load_design, path, ["antenna.length_mm=os.system"]).endswith(
        'antenna.length_mm (from --set): must be a number (got "os.system")')


# ------------------------------------------------------------------------------------ shapes


@pytest.mark.parametrize("shape, extra, ok", [
    ("meander", "turns = 3\npitch_mm = 5\nheight_mm = 8\n", True),
    ("meander", "turns = 3\npitch_mm = 5\n", False),
    ("folded", "spacing_mm = 10\n", True),
    ("folded", "", False),
    ("dipole", "turns = 3\n", False),
])
def test_shape_specific_keys(tmp_path, shape, extra, ok):
    text = DESIGN.replace('"dipole"', f'"{shape}"').replace("length_mm = 150\n",
                                                            "length_mm = 150\n" + extra)
    path = write(tmp_path, text)
    if ok:
        assert load_design(path).antenna.shape == shape
    else:
        msg = error(load_design, path)
        assert ("required for shape" in msg) or ("not a key of shape" in msg)


def test_loop_and_wires(tmp_path):
    loop = DESIGN.replace('"dipole"', '"loop"').replace("length_mm = 150",
                                                        "circumference_mm = 320\nsides = 16")
    d = load_design(write(tmp_path, loop))
    design, _, _ = design_from(d)
    assert design.dimensions == {"circumference_m": pytest.approx(0.32), "sides": 16.0}
    wires = """
    [antenna]
    shape = "wires"
    conductivity_s_per_m = "pec"
    radius_mm = 0.5
    feed_point_mm = [0, 0, 0]
    wires = [
      { points_mm = [[-75, 0, 0], [0, 0, 0], [75, 0, 0]] },
      { points_mm = [[75, 0, 0], [75, 20, 0]], width_mm = 2, thickness_mm = 0.3 },
    ]
    [band]
    start_mhz = 800
    stop_mhz = 1000
    """
    d = load_design(write(tmp_path, wires))
    design, band, _ = design_from(d)
    assert design.conductivity_s_per_m == math.inf
    assert design.feed_point_m == (0.0, 0.0, 0.0)
    assert design.wires[0].section.kind == "round"
    assert design.wires[0].section.radius_m == pytest.approx(0.5e-3)
    assert design.wires[1].section.width_m == pytest.approx(2e-3)
    assert design.wires[1].points[1] == pytest.approx((0.075, 0.02, 0.0))
    assert band.target_hz == pytest.approx(900e6)  # default target: the band's centre
    bad = wires.replace("[[75, 0, 0], [75, 20, 0]]", "[[75, 0, 0], [75, 20]]")
    assert "antenna.wires[1].points_mm[1]: must be a point [x, y, z] in mm" in \
        error(load_design, write(tmp_path, bad))
    bad = wires.replace("radius_mm = 0.5\n", "")
    assert "antenna.wires[0].width_mm: missing cross-section" in \
        error(load_design, write(tmp_path, bad))


# ------------------------------------------------------------------------------------- space


def test_space_flattening_and_names(tmp_path):
    text = STUDY.replace("[space]\n", "[space]\nantenna.width_mm = [2, 3]\n"
                                      "switch.open.c_pf = {min = 0.05, max = 0.2}\n")
    study = load_study(write(tmp_path, text))
    by_name = {p.name: p for p in study.parameters}
    assert list(by_name) == sorted(["antenna.length_mm", "antenna.width_mm", "feed.gap_mm",
                                    "switch.closed.r_ohm", "switch.open.c_pf"])
    assert by_name["feed.gap_mm"].kind == "choice"
    assert by_name["feed.gap_mm"].values == (0.5, 1.0)
    r = by_name["switch.closed.r_ohm"]
    assert (r.kind, r.min, r.max, r.log) == ("range", 5.0, 50.0, True)
    assert (r.section, r.key) == ("switch.closed", "r_ohm")


def test_varied_key_may_be_absent_from_antenna(tmp_path):
    study = load_study(write(tmp_path, STUDY.replace("length_mm = 150\n", "")))
    assert study.antenna.length_mm == 130.0  # the base holds the range's min
    design, _, _ = design_from(study, {"antenna.length_mm": 160.0})
    assert design.dimensions["length_m"] == pytest.approx(0.16)


def test_space_errors(tmp_path):
    path = write(tmp_path, STUDY)
    cases = {
        "space.length_mm={min = -5, max = 2}": "space.length_mm.min: must be > 0 (got -5)",
        "space.length_mm={min = 5, max = 2}": "space.length_mm.max (from --set): must be > min",
        "space.length_mm={min = 0.0, max = 2, log = true}": "a log-scaled range needs min > 0",
        "space.length_mm=[]": "space.length_mm: the list of values is empty",
        "space.length_mm=[140, 'x']": 'space.length_mm[1]: must be a number (got "x")',
        "space.length_mm=[140, 140.0]": "space.length_mm[1]: duplicate value 140.0",
        "space.length_mm=150": "space.length_mm: a parameter is {min, max, log, steps} or a list",
        "space.length_mm={mn = 1, max = 2}": "space.length_mm.mn (from --set): unknown key; "
                                             "did you mean min?",
        "space.turns=[1, 2]": 'space.turns: not a key of shape "dipole"',
        "space.shape=['meander']": "antenna.shape cannot be varied",
        "space.switch.closed.r_ohms=[1]": "space.switch.closed.r_ohms: unknown key; did you "
                                          "mean r_ohm?",
        "space.switch.close.r_ohm=[1]": "space.switch.close: expected switch.closed.<key>",
        "space.feed.gapmm=[1]": "space.feed.gapmm: unknown key; did you mean gap_mm?",
        "space.antenna.length_mm=[1, 2]": "space.antenna.length_mm: antenna.length_mm is given "
                                          "twice (also as space.length_mm)",
        "space.band.points=[3]": "space.band: unknown key",
        "space.length_mm={min = 1, max = 2, steps = 3}": "space.length_mm.steps: only used with "
                                                         'sampler.method = "grid"',
    }
    for override, expected in cases.items():
        assert expected in error(load_study, path, [override]), override


def test_empty_space(tmp_path):
    text = STUDY.split("[space]")[0] + "[space]\n[sampler]\nmethod = 'sobol'\npoints = 4\n"
    assert "space: no parameters" in error(load_study, write(tmp_path, text))


def test_sampler_rules(tmp_path):
    path = write(tmp_path, STUDY)
    grid = load_study(path, ["sampler.method=grid", "sampler.points=3"])
    assert {p.name: p.steps for p in grid.parameters if p.kind == "range"} == {
        "antenna.length_mm": 3, "switch.closed.r_ohm": 3}
    assert "needs steps here" in error(load_study, path, ["sampler={method = 'grid'}"])
    assert "sampler.points: required for method \"lhs\"" in error(
        load_study, path, ["sampler={method = 'lhs'}"])
    only_steps = ["sampler.method=grid", "space.length_mm={min=1, max=2, steps=4}",
                  "space.switch.closed.r_ohm=[1, 2]"]
    assert "sampler.points: not used" in error(load_study, path, only_steps)
    ok = load_study(path, [*only_steps, "sampler={method = 'grid'}"])
    assert ok.parameter("antenna.length_mm").steps == 4
    assert "sampler.points (from --set): must be > 0 (got 0)" in error(
        load_study, path, ["sampler.points=0"])


def test_integer_parameters(tmp_path):
    text = STUDY.replace('"dipole"', '"meander"').replace(
        "length_mm = 150\n", "length_mm = 150\npitch_mm = 4\nheight_mm = 8\n").replace(
        "[space]\n", "[space]\nturns = {min = 1, max = 4}\n")
    path = write(tmp_path, text)
    study = load_study(path)
    turns = study.parameter("antenna.turns")
    assert turns.integer and study.antenna.turns == 1
    grid = load_study(path, ["sampler={method = 'grid'}", "space.length_mm=[150]",
                             "space.switch.closed.r_ohm=[5]"])
    assert grid.parameter("antenna.turns").steps == 4  # one step per whole number
    assert "space.turns.min: must be a whole number (got 1.5)" in error(
        load_study, path, ["space.turns={min = 1.5, max = 4}"])
    assert "has only 4 values (got steps = 6)" in error(
        load_study, path, ["sampler={method = 'grid'}", "space.turns={min=1, max=4, steps=6}",
                           "space.length_mm=[150]", "space.switch.closed.r_ohm=[5]"])
    design, _, _ = design_from(study, {"antenna.turns": np.float64(3.0)})
    assert design.dimensions["turns"] == 3.0
    assert "parameter antenna.turns: must be a whole number (got 2.5)" in error(
        design_from, study, {"antenna.turns": 2.5})


def test_optimize_rules(tmp_path):
    path = write(tmp_path, STUDY)
    opt = ["sampler={method = 'optimize'}",
           "optimize={trials = 20, objectives = [{metric = 'delta_rcs_dbsm', goal = 'max'}], "
           "constraints = [{metric = 'resonance_mhz', min = 902, max = 928}]}"]
    study = load_study(path, opt)
    assert study.optimize.trials == 20 and study.optimize.algorithm == "tpe"
    assert study.optimize.constraints[0].max == 928
    assert 'missing section [optimize]' in error(load_study, path, opt[:1])
    assert "optimize: only used with sampler.method = \"optimize\"" in error(
        load_study, path, opt[1:])
    assert "sampler.points: not used with method = \"optimize\"" in error(
        load_study, path, ["sampler.method=optimize", opt[1]])
    bad = opt[1].replace("delta_rcs_dbsm", "delta_rcs")
    assert 'optimize.objectives[0].metric (from --set): unknown metric "delta_rcs"; did you ' \
           "mean delta_rcs_dbsm?" in error(load_study, path, [opt[0], bad])
    bad = opt[1].replace(", min = 902, max = 928", "")
    assert "optimize.constraints[0].min (from --set): give min, max or both" in error(
        load_study, path, [opt[0], bad])
    bad = opt[1].replace("goal = 'max'", "goal = 'up'")
    assert "optimize.objectives[0].goal (from --set): must be one of 'max' or 'min'" in error(
        load_study, path, [opt[0], bad])


def test_cluster_rules(tmp_path):
    path = write(tmp_path, STUDY)
    assert load_study(path, ["cluster.workers=3"]).cluster.workers == 3
    joined = load_study(path, ["cluster.scheduler=tcp://127.0.0.1:8786"]).cluster
    assert joined.workers is None and joined.scheduler == "tcp://127.0.0.1:8786"
    jq = load_study(path, ["cluster.jobqueue={system = 'slurm', queue = 'short', cores = 4, "
                           "memory = '8GB', walltime = '01:00:00', jobs = 2, "
                           "options = {account = 'rf-lab'}}"]).cluster.jobqueue
    assert (jq.system, jq.cores, jq.jobs, jq.options) == ("slurm", 4, 2, {"account": "rf-lab"})
    assert 'cluster.scheduler (from --set): must be "tcp://host:port"' in error(
        load_study, path, ["cluster.scheduler=localhost:8786"])
    assert "cluster.jobqueue (from --set): give scheduler" in error(
        load_study, path, ["cluster.scheduler=tcp://h:1",
                           "cluster.jobqueue={system='pbs', cores=1, memory='1GB'}"])
    assert "cluster.jobqueue.system (from --set): must be one of" in error(
        load_study, path, ["cluster.jobqueue={system='cron', cores=1, memory='1GB'}"])
    assert "cluster.workers (from --set): must be >= 1 (got 0)" in error(
        load_study, path, ["cluster.workers=0"])


def test_surrogate_and_study_sections(tmp_path):
    path = write(tmp_path, STUDY)
    s = load_study(path, ["surrogate.targets=['efficiency', 'gain_dbi']", "surrogate.model=gp"])
    assert s.surrogate.targets == ("efficiency", "gain_dbi")
    assert "surrogate.targets (from --set): efficiency is listed twice" in error(
        load_study, path, ["surrogate.targets=['efficiency', 'efficiency']"])
    assert "study.name (from --set): only letters" in error(load_study, path,
                                                            ["study.name='a b'"])
    assert "study.store (from --set): not an SQLAlchemy URL" in error(
        load_study, path, ["study.store=nonsense"])


# ------------------------------------------------------------------------ canonical, hashing


def test_canonical_is_json_and_sorted(tmp_path):
    study = load_study(write(tmp_path, STUDY))
    canon = study.canonical()
    text = json.dumps(canon, allow_nan=False)
    assert json.loads(text) == canon
    assert list(canon) == sorted(canon)
    assert canon["space"]["switch.closed.r_ohm"] == {
        "integer": False, "kind": "range", "log": True, "max": 50.0, "min": 5.0, "values": []}
    assert set(METRIC_NAMES) >= set(study.surrogate.targets)


def test_plan_fingerprint(tmp_path):
    path = write(tmp_path, STUDY)
    base = load_study(path)
    fp = base.plan_fingerprint()
    assert len(fp) == 64 and fp == load_study(path).plan_fingerprint()
    # same plan: int vs float spelling, reordered [space], things that never change a result
    same = [
        ["antenna.length_mm=150.0"],
        ["cluster.workers=1"], ["study.name=other"], ["study.store='sqlite:///x.db'"],
        ["surrogate.model=gp"], ["reader.tx_power_dbm=33"],
    ]
    for ov in same:
        assert load_study(path, ov).plan_fingerprint() == fp, ov
    reordered = STUDY.replace(
        "length_mm = { min = 130, max = 170 }\nfeed.gap_mm = [0.5, 1.0]\n",
        "feed.gap_mm = [0.5, 1.0]\nlength_mm = { min = 130, max = 170 }\n")
    assert reordered != STUDY
    assert load_study(write(tmp_path, reordered, "b.toml")).plan_fingerprint() == fp
    changed = [
        ["antenna.width_mm=2"], ["feed.z0_ohm=75"], ["switch.open.c_pf=0.3"],
        ["band.points=31"], ["space.length_mm={min = 130, max = 171}"], ["sampler.seed=1"],
        ["sampler.points=16"], ["sampler.method=lhs"],
    ]
    fps = {load_study(path, ov).plan_fingerprint() for ov in changed}
    assert fp not in fps and len(fps) == len(changed)
    # the reader only changes read_range_m: its own fingerprint
    assert load_study(path, ["reader.tx_power_dbm=33"]).metrics_fingerprint() != \
        base.metrics_fingerprint()
    assert load_study(path, ["antenna.width_mm=2"]).metrics_fingerprint() == \
        base.metrics_fingerprint()
    assert base.plan_content()["solver"]["solver_version"] == \
        SolverSettings().fingerprint()["solver_version"]


# ---------------------------------------------------------------------------------- designio


def test_design_from_converts_units(tmp_path):
    text = DESIGN + """
[feed]
gap_mm = 1.5
z0_ohm = 75
feed_offset_mm = 10
[switch]
closed = { r_ohm = 30, l_nh = 2 }
open = { r_ohm = 1, c_pf = 0.15 }
[reader]
tx_power_dbm = 36
sensitivity_dbm = -70
"""
    design, band, reader = design_from(load_design(write(tmp_path, text)))
    assert design.dimensions == {"length_m": pytest.approx(0.150)}
    assert design.section.kind == "rect"
    assert (design.section.width_m, design.section.thickness_m) == pytest.approx((3e-3, 4e-4))
    assert design.conductivity_s_per_m == 3e4
    assert (design.gap_m, design.feed_offset_m, design.z0_ohm) == pytest.approx((1.5e-3, 0.01,
                                                                                  75.0))
    assert design.switch.closed.r_ohm == 30 and design.switch.closed.l_h == pytest.approx(2e-9)
    assert math.isinf(design.switch.closed.c_f)
    assert design.switch.open.c_f == pytest.approx(0.15e-12)
    assert (band.start_hz, band.stop_hz, band.points, band.target_hz) == pytest.approx(
        (800e6, 1000e6, 21, 915e6))
    assert reader.tx_power_w == pytest.approx(10 ** 0.6)  # 36 dBm = 3.98 W
    assert reader.sensitivity_w == pytest.approx(1e-10)


def test_design_from_applies_point_values(tmp_path):
    study = load_study(write(tmp_path, STUDY))
    design, _, _ = design_from(study, {"antenna.length_mm": np.float64(140.0),
                                       "feed.gap_mm": 0.5, "switch.closed.r_ohm": 12,
                                       "antenna.conductivity_s_per_m": "pec"})
    assert design.dimensions["length_m"] == pytest.approx(0.14)
    assert design.gap_m == pytest.approx(5e-4)
    assert design.switch.closed.r_ohm == 12.0
    assert design.switch.closed.l_h == pytest.approx(SwitchStates().closed.l_h)
    assert design.conductivity_s_per_m == math.inf
    base, _, _ = design_from(study)
    assert base.dimensions["length_m"] == pytest.approx(0.15)  # the base is unchanged
    assert "parameter antenna.lenght_mm: unknown parameter; did you mean antenna.length_mm?" \
        in error(design_from, study, {"antenna.lenght_mm": 1.0})
    assert "parameter antenna.length_mm: must be > 0 (got -1.0)" in error(
        design_from, study, {"antenna.length_mm": -1})
    assert "radius_mm" in error(design_from, study, {"antenna.radius_mm": 0.5})
    assert solver_settings(study) == SolverSettings()
