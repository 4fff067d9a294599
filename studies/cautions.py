"""The cautions shown beside any read range (``evaluate`` output, ``--json`` and reports).

A reader is a radio transmitter and tags may go on things people rely on. These are cautions,
not compliance advice: the references name where the rules live, not what they allow.
"""

from __future__ import annotations

__all__ = ["READ_RANGE_CAUTIONS", "read_range_cautions"]

#: One line each; ASCII only so they print on any terminal.
READ_RANGE_CAUTIONS: tuple[str, ...] = (
    "Radiated power and bands are set by local regulations: check the local rules for the ISM "
    "band used (e.g. US 47 CFR 15.247, EU ETSI EN 302 208).",
    "RF exposure limits apply (ICNIRP 2020 guidelines, IEEE Std C95.1-2019).",
    "Results are engineering estimates, not a certification; defer to local codes and licensed "
    "practice.",
    "Do not rely on a tag for medical or safety functions without qualified review.",
)


def read_range_cautions(values: dict[str, float | None]) -> list[str]:
    """The cautions to show for a set of metric values: all of them when a read range exists."""
    return list(READ_RANGE_CAUTIONS) if values.get("read_range_m") is not None else []
