"""Config → physics objects: the one place where config units meet SI.

mm → m, MHz → Hz, nH → H, pF → F, dBm → W, ``"pec"`` → ``math.inf``; the cross-section through
:meth:`sweeps.geometry.CrossSection.trace` (flat printed trace) or
:meth:`~sweeps.geometry.CrossSection.round_wire`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from pydantic import ValidationError

from studies.config import DesignConfig
from studies.constants import VARIABLE_KEYS
from studies.sections import Antenna, Feed, Reader, Switch, SwitchLoadConfig
from studies.spacespec import check_value
from studies.tomlfile import describe_validation_error, suggest
from sweeps.design import Band as PhysBand
from sweeps.design import Design, SwitchLoad, SwitchStates, WireSpec
from sweeps.design import Reader as PhysReader
from sweeps.errors import ConfigError
from sweeps.geometry import CrossSection
from sweeps.mom.solve import SolverSettings

__all__ = [
    "design_from",
    "apply_parameters",
    "solver_settings",
    "switch_states",
    "reader_from",
    "dbm_to_w",
    "w_to_dbm",
    "PARAMETER_NAMES",
]

MM = 1e-3
MHZ = 1e6
NH = 1e-9
PF = 1e-12

#: Every canonical parameter name :func:`design_from` accepts.
PARAMETER_NAMES: tuple[str, ...] = tuple(
    f"{section}.{key}" for section, keys in VARIABLE_KEYS.items() for key in keys
)


def dbm_to_w(dbm: float) -> float:
    """Power in W from dBm: ``1 mW * 10**(dBm/10)``."""
    return 1e-3 * 10.0 ** (dbm / 10.0)


def w_to_dbm(w: float) -> float:
    """Power in dBm from W."""
    return 10.0 * math.log10(w / 1e-3)


def _section(width_mm: float | None, thickness_mm: float | None, radius_mm: float | None
             ) -> CrossSection | None:
    if radius_mm is not None:
        return CrossSection.round_wire(radius_mm * MM)
    if width_mm is not None and thickness_mm is not None:
        return CrossSection.trace(width_mm * MM, thickness_mm * MM)
    return None


def _load(cfg: SwitchLoadConfig) -> SwitchLoad:
    return SwitchLoad(
        r_ohm=cfg.r_ohm,
        l_h=cfg.l_nh * NH,
        c_f=math.inf if cfg.c_pf is None else cfg.c_pf * PF,
    )


def switch_states(switch: Switch) -> SwitchStates:
    """The two switch loads in SI."""
    return SwitchStates(closed=_load(switch.closed), open=_load(switch.open))


def reader_from(reader: Reader) -> PhysReader:
    """The reader in SI (W for powers)."""
    return PhysReader(
        tx_power_w=dbm_to_w(reader.tx_power_dbm),
        antenna_gain_dbi=reader.antenna_gain_dbi,
        sensitivity_w=dbm_to_w(reader.sensitivity_dbm),
        cancellation_db=reader.cancellation_db,
    )


def _design(antenna: Antenna, feed: Feed, switch: Switch) -> Design:
    section = _section(antenna.width_mm, antenna.thickness_mm, antenna.radius_mm)
    wires: tuple[WireSpec, ...] = ()
    if antenna.shape == "wires":
        specs = []
        for w in antenna.wires or ():
            own = _section(w.width_mm, w.thickness_mm, w.radius_mm) or section
            specs.append(WireSpec(points=tuple(
                (x * MM, y * MM, z * MM) for x, y, z in w.points_mm), section=own))
        wires = tuple(specs)
        if section is None:
            section = wires[0].section
    assert section is not None  # guaranteed by Antenna validation
    dims: dict[str, float] = {}
    for key in ("length_mm", "pitch_mm", "height_mm", "spacing_mm", "circumference_mm"):
        value = getattr(antenna, key)
        if value is not None:
            dims[key.removesuffix("_mm") + "_m"] = value * MM
    for key in ("turns", "sides"):
        value = getattr(antenna, key)
        if value is not None:
            dims[key] = float(value)
    sigma = antenna.conductivity_s_per_m
    return Design(
        shape=antenna.shape,
        dimensions=dims,
        section=section,
        conductivity_s_per_m=math.inf if sigma == "pec" else float(sigma),
        gap_m=feed.gap_mm * MM,
        feed_offset_m=feed.feed_offset_mm * MM,
        z0_ohm=feed.z0_ohm,
        switch=switch_states(switch),
        segments=antenna.segments,
        wires=wires,
        feed_point_m=None if antenna.feed_point_mm is None
        else tuple(v * MM for v in antenna.feed_point_mm),  # type: ignore[arg-type]
    )


def apply_parameters(config: DesignConfig, params: Mapping[str, Any]
                     ) -> tuple[Antenna, Feed, Switch]:
    """The ``[antenna]``, ``[feed]`` and ``[switch]`` of ``config`` with ``params`` on top.

    Parameters
    ----------
    config : DesignConfig or Study
    params : mapping
        Canonical dotted names (``antenna.length_mm``, ``switch.closed.r_ohm``) to values in
        config units.

    Raises
    ------
    ConfigError
        An unknown name or a value the key does not accept, naming both.
    """
    if not params:
        return config.antenna, config.feed, config.switch
    raw: dict[str, dict[str, Any]] = {
        "antenna": config.antenna.model_dump(),
        "feed": config.feed.model_dump(),
        "switch.closed": config.switch.closed.model_dump(),
        "switch.open": config.switch.open.model_dump(),
    }
    for name, value in params.items():
        if name not in PARAMETER_NAMES:
            raise ConfigError(f"parameter {name}: unknown parameter"
                              + suggest(name, PARAMETER_NAMES))
        section, _, key = name.rpartition(".")
        raw[section][key] = check_value(name, value, f"parameter {name}")
    label = "parameters " + ", ".join(f"{k} = {v!r}" for k, v in params.items())
    try:
        antenna = Antenna.model_validate(raw["antenna"])
        feed = Feed.model_validate(raw["feed"])
        switch = Switch.model_validate({"closed": raw["switch.closed"],
                                        "open": raw["switch.open"]})
    except ValidationError as exc:  # a cross-key rule broken by the values
        raise ConfigError(describe_validation_error(exc, label)) from None
    return antenna, feed, switch


def design_from(config: DesignConfig, params: Mapping[str, Any] | None = None
                ) -> tuple[Design, PhysBand, PhysReader]:
    """The physics objects of a design config (or of one point of a study), in SI.

    Parameters
    ----------
    config : DesignConfig or Study
        A validated config (from :func:`~studies.config.load_design` or ``load_study``).
    params : mapping, optional
        A point's parameter values by canonical dotted name, in config units, applied on top of
        the base config (numpy scalars and integral floats for whole-number keys are accepted).

    Returns
    -------
    design : sweeps.design.Design
    band : sweeps.design.Band
        Frequencies in Hz.
    reader : sweeps.design.Reader
        Powers in W.
    """
    antenna, feed, switch = apply_parameters(config, params or {})
    b = config.band
    band = PhysBand(start_hz=b.start_mhz * MHZ, stop_hz=b.stop_mhz * MHZ, points=b.points,
                    target_hz=b.target_mhz * MHZ)
    return _design(antenna, feed, switch), band, reader_from(config.reader)


def solver_settings(config: DesignConfig | None = None) -> SolverSettings:
    """The solver settings of a config. The contract has no solver section yet: the defaults."""
    return SolverSettings()
