"""A newcomer's first session in an empty folder: ``init`` → edit → ``run`` → ``fit`` →
``report``, all through the CLI, on a small study (8 points, a coarse band).

External check: the report's embedded PNGs are decoded and their IHDR read (PNG
specification, ISO/IEC 15948); the page is parsed with ``html.parser``.
"""

from __future__ import annotations

import base64
import importlib.util
import re

from studies.cli import main, verb_module_name
from tests.studies.test_report import parse_page, png_size

SURROGATE_FIGURES = {"tradeoff", "sensitivity", "yield"}


def _cli(capsys, *argv: object) -> tuple[int, str, str]:
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def _small(text: str) -> str:
    """Edit the starter study as a user would: fewer points, a coarser band, one worker, and
    two surrogate targets that every point has (the carbon-filled half of the designs has no
    resonance in band), fitted by a Gaussian process."""
    for pattern, new in ((r"(?m)^points = \d+(?=\s+# frequencies)", "points = 15"),
                         (r"(?m)^points = \d+(?=\s+# a power of two)", "points = 16"),
                         (r"(?m)^workers = \d+", "workers = 1"),
                         (r"(?m)^targets = \[.*\]", 'targets = ["efficiency", "delta_rcs_dbsm"]'),
                         (r'(?m)^model = "auto"', 'model = "gp"')):
        text, n = re.subn(pattern, new, text, count=1)
        assert n == 1, pattern
    return text


def test_init_run_fit_report(tmp_path, capsys):
    folder = tmp_path / "my_tag"
    code, out, err = _cli(capsys, "init", folder)
    assert code == 0, err
    study = folder / "study.toml"
    study.write_text(_small(study.read_text()))

    code, out, err = _cli(capsys, "run", study, "--no-progress")
    assert code == 0, err
    assert "done 16, failed 0" in out

    fitted = importlib.util.find_spec(verb_module_name("fit")) is not None
    if fitted:
        code, out, err = _cli(capsys, "fit", study)
        assert code == 0, err

    # resonance_mhz is no target here, so the yield needs its spec (the default spec is on it)
    code, out, err = _cli(capsys, "report", study, "--spec", "efficiency=0.5:")
    assert code == 0, err
    page_path = folder / "study-report" / "report.html"  # the default: beside the config
    assert f"wrote {page_path}" in out
    page = parse_page(page_path)
    missing = set(page.missing)
    if fitted:
        assert missing == set(), page.missing
    else:
        assert missing == SURROGATE_FIGURES
        assert all("not available" in page.missing[k] for k in SURROGATE_FIGURES)
    for key, src in page.images.items():
        data = base64.b64decode(src.split(",", 1)[1])
        assert png_size(data)[0] >= 300
        assert (folder / "study-report" / f"{key}.png").read_bytes() == data
    assert page.cautions and page.table_rows == 4
