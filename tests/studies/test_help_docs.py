"""``docs/metrics.md`` documents every metric: one section per name of
``sweeps.metrics.METRIC_NAMES``, in that order, each with its unit (as ``METRIC_UNITS``), a
definition, a source and caveats."""

from __future__ import annotations

import re
from pathlib import Path

from sweeps.metrics import METRIC_NAMES, METRIC_UNITS

DOC = Path(__file__).resolve().parents[2] / "docs" / "metrics.md"


def _sections() -> dict[str, str]:
    text = DOC.read_text(encoding="utf-8")
    parts = re.split(r"^## (\S+)\s*$", text, flags=re.MULTILINE)
    return dict(zip(parts[1::2], parts[2::2], strict=True))


def test_one_section_per_metric_in_order():
    assert list(_sections()) == list(METRIC_NAMES)


def test_each_section_has_unit_definition_source_and_caveats():
    for name, body in _sections().items():
        for field in ("**Unit**", "**Definition**", "**Source**", "**Caveats**"):
            assert field in body, (name, field)
        unit = re.search(r"\*\*Unit\*\* ([^.(]+?)[ .(]", body).group(1)
        assert unit == METRIC_UNITS[name], (name, unit)
        assert len(body.split("**Caveats**")[1].split()) >= 10, name  # says something


def test_read_range_carries_the_cautions():
    body = _sections()["read_range_m"]
    for needle in ("local regulations", "RF exposure", "not a certification",
                   "licensed practice"):
        assert needle in body
