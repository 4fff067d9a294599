"""``filamant init``: the starter files load and evaluate; nothing is overwritten by accident."""

from studies.cli import main
from studies.config import load_design, load_study


def test_init_writes_loadable_starters(tmp_path, capsys):
    assert main(["init", str(tmp_path)]) == 0
    design = load_design(tmp_path / "design.toml")
    study = load_study(tmp_path / "study.toml")
    assert design.antenna.shape == "dipole"
    assert study.name == "study"
    # a second init refuses and leaves the files as they were
    before = (tmp_path / "study.toml").read_bytes()
    capsys.readouterr()
    assert main(["init", str(tmp_path)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "already exists" in err[0]
    assert (tmp_path / "study.toml").read_bytes() == before
    assert main(["init", str(tmp_path), "--force"]) == 0


def test_init_design_evaluates(tmp_path, capsys):
    assert main(["init", str(tmp_path)]) == 0
    capsys.readouterr()
    assert main(["evaluate", str(tmp_path / "design.toml"), "--json"]) == 0
    assert '"resonance_mhz"' in capsys.readouterr().out
