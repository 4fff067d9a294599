"""``filamant run --refine N``: N surrogate-chosen points are added, evaluated and refitted."""

import pytest

from studies.api import load_context, study_status
from studies.cli import main
from studies.surrogate_api import study_surrogate_path
from tests.studies.studies_store_support import write_study


@pytest.mark.slow
def test_run_refine_adds_evaluates_and_refits(tmp_path, capsys):
    cfg = write_study(tmp_path, points=16, workers=1)
    assert main(["run", str(cfg), "--no-progress"]) == 0
    assert main(["run", str(cfg), "--no-progress", "--refine", "3"]) == 0
    out = capsys.readouterr().out
    assert "refined: 3 point(s) added" in out
    status = study_status(cfg)
    assert status["done"] == 19 and status["failed"] == 0
    assert study_surrogate_path(load_context(cfg)).exists()


def test_refine_needs_a_positive_count(tmp_path, capsys):
    cfg = write_study(tmp_path, points=4, workers=1)
    assert main(["run", str(cfg), "--refine", "0"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--refine" in err
