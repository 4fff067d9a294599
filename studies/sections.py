"""The TOML sections of a filamant config as frozen, strict pydantic models (config units).

Every table forbids unknown keys (the error names the key and suggests the closest valid one);
numbers are strict (a string is never read as a number) and finite. :mod:`studies.config`
assembles these into a :class:`~studies.config.DesignConfig` or :class:`~studies.config.Study`.
"""

from __future__ import annotations

import math
import os
import re
from collections.abc import Mapping, Sequence
from typing import Annotated, Any, Literal, NoReturn

from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    PlainValidator,
    ValidationError,
    field_validator,
    model_validator,
)
from pydantic_core import PydanticCustomError

from studies.constants import (
    METRIC_NAMES,
    SHAPE_KEYS,
    SHAPE_SPECIFIC_KEYS,
    Goal,
    JobqueueSystem,
    OptimizeAlgorithm,
    ParameterKind,
    SamplerMethod,
    ShapeName,
    SurrogateModel,
)
from studies.tomlfile import describe_validation_error, error_text, show_value, suggest
from sweeps.design import Reader as _PhysReader
from sweeps.design import SwitchLoad, SwitchStates
from sweeps.errors import ConfigError

__all__ = [
    "Antenna",
    "WireConfig",
    "Feed",
    "SwitchLoadConfig",
    "Switch",
    "Band",
    "Reader",
    "StudySection",
    "Sampler",
    "Objective",
    "Constraint",
    "Optimize",
    "Jobqueue",
    "Cluster",
    "Surrogate",
    "ParameterSpec",
    "RangeSpec",
    "STRICT",
    "validate_table",
]

STRICT = ConfigDict(extra="forbid", frozen=True, strict=True, allow_inf_nan=False)


def _fail(key: str | None, text: str) -> NoReturn:
    """Raise a validation error with our own text; ``key`` is appended to the location."""
    raise PydanticCustomError("filamant", "{text}", {"text": text, "key": key or ""})


def _r12(x: float) -> float:
    """Round to 12 significant digits (unit conversions of defaults: 1e-9 * 1e9 -> 1.0)."""
    return float(f"{x:.12g}")


class _Table(BaseModel):
    """A TOML table: unknown keys are errors with a suggestion."""

    model_config = STRICT

    @model_validator(mode="before")
    @classmethod
    def _known_keys(cls, data: Any) -> Any:
        if isinstance(data, dict):
            known = cls.model_fields.keys()
            for key in data:
                if key not in known:
                    raise PydanticCustomError(
                        "unknown_key", "unknown key {key}",
                        {"key": str(key), "known": ",".join(known)},
                    )
        return data


def _tuple(value: Any) -> Any:
    return tuple(value) if isinstance(value, list) else value


def _point(value: Any) -> Any:
    if isinstance(value, list):
        value = tuple(value)
    if isinstance(value, tuple) and len(value) != 3:
        _fail(None, f"must be a point [x, y, z] in mm (got {show_value(list(value))})")
    return value


def _conductivity(value: Any) -> float | str:
    if value == "pec" and isinstance(value, str):
        return "pec"
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        _fail(None, f'must be a number in S/m or "pec" (got {show_value(value)})')
    if not (math.isfinite(value) and value > 0):
        _fail(None, f'must be > 0 S/m or "pec" (got {show_value(value)})')
    return float(value)


def _metric(value: Any) -> str:
    if not isinstance(value, str):
        _fail(None, f"must be a metric name (got {show_value(value)})")
    if value not in METRIC_NAMES:
        _fail(None, f"unknown metric {show_value(value)}" + suggest(value, METRIC_NAMES))
    return value


Positive = Annotated[float, Field(gt=0)]
NonNegative = Annotated[float, Field(ge=0)]
Point = Annotated[tuple[float, float, float], BeforeValidator(_point)]
Conductivity = Annotated[float | Literal["pec"], PlainValidator(_conductivity)]
MetricName = Annotated[str, PlainValidator(_metric)]


def _section_rule(obj: Any, required: bool) -> None:
    """width_mm + thickness_mm (flat trace) XOR radius_mm (round wire)."""
    w, t, r = obj.width_mm, obj.thickness_mm, obj.radius_mm
    if r is not None and (w is not None or t is not None):
        _fail("radius_mm", "give radius_mm (round wire) or width_mm + thickness_mm (flat "
                           "trace), not both")
    if w is not None and t is None:
        _fail("thickness_mm", "required with width_mm (a flat trace needs both)")
    if t is not None and w is None:
        _fail("width_mm", "required with thickness_mm (a flat trace needs both)")
    if required and r is None and w is None:
        _fail("width_mm", "missing cross-section: give width_mm + thickness_mm (flat printed "
                          "trace) or radius_mm (round wire)")


class WireConfig(_Table):
    """One free polyline of ``shape = "wires"`` (points in mm; its own cross-section, else the
    antenna's)."""

    points_mm: Annotated[tuple[Point, ...], BeforeValidator(_tuple), Field(min_length=2)]
    width_mm: Positive | None = None
    thickness_mm: Positive | None = None
    radius_mm: Positive | None = None

    @model_validator(mode="after")
    def _check(self) -> WireConfig:
        _section_rule(self, required=False)
        return self

    @property
    def has_section(self) -> bool:
        return self.width_mm is not None or self.radius_mm is not None


class Antenna(_Table):
    """``[antenna]``: the shape, its size and cross-section (mm) and the filament (S/m).

    Shape-specific keys (:data:`studies.constants.SHAPE_KEYS`): ``dipole`` length_mm;
    ``meander`` length_mm (end to end), turns (per arm), pitch_mm, height_mm; ``folded``
    length_mm, spacing_mm; ``loop`` circumference_mm, sides (optional); ``wires`` wires,
    feed_point_mm. A key of another shape is an error.
    """

    shape: ShapeName
    conductivity_s_per_m: Conductivity
    length_mm: Positive | None = None
    width_mm: Positive | None = None
    thickness_mm: Positive | None = None
    radius_mm: Positive | None = None
    segments: Annotated[int, Field(ge=1)] | None = None
    turns: Annotated[int, Field(ge=1)] | None = None
    pitch_mm: Positive | None = None
    height_mm: Positive | None = None
    spacing_mm: Positive | None = None
    circumference_mm: Positive | None = None
    sides: Annotated[int, Field(ge=3)] | None = None
    wires: Annotated[
        tuple[WireConfig, ...], BeforeValidator(_tuple), Field(min_length=1)
    ] | None = None
    feed_point_mm: Point | None = None

    @model_validator(mode="after")
    def _check_shape(self) -> Antenna:
        required, optional = SHAPE_KEYS[self.shape]
        for key in SHAPE_SPECIFIC_KEYS:
            if getattr(self, key) is not None and key not in required + optional:
                keys = ", ".join(required + optional)
                _fail(key, f"not a key of shape {show_value(self.shape)} (its keys: {keys})")
        for key in required:
            if getattr(self, key) is None:
                _fail(key, f"required for shape {show_value(self.shape)}")
        if self.shape == "wires":
            _section_rule(self, required=False)
            has_default = self.width_mm is not None or self.radius_mm is not None
            for i, wire in enumerate(self.wires or ()):
                if not wire.has_section and not has_default:
                    _fail(f"wires[{i}].width_mm",
                          "missing cross-section: give width_mm + thickness_mm or radius_mm "
                          "on the wire or in [antenna]")
        else:
            _section_rule(self, required=True)
        return self


class Feed(_Table):
    """``[feed]``: gap width (mm), reference impedance (ohm), gap position from the centre (mm)."""

    gap_mm: NonNegative = 0.0
    z0_ohm: Positive = 50.0
    feed_offset_mm: float = 0.0


class SwitchLoadConfig(_Table):
    """One switch state: series ``r_ohm``, ``l_nh`` and ``c_pf`` (absent: no capacitor)."""

    r_ohm: NonNegative = 0.0
    l_nh: NonNegative = 0.0
    c_pf: Positive | None = None


def _load_default(load: SwitchLoad) -> SwitchLoadConfig:
    return SwitchLoadConfig(
        r_ohm=_r12(load.r_ohm),
        l_nh=_r12(load.l_h * 1e9),
        c_pf=None if math.isinf(load.c_f) else _r12(load.c_f * 1e12),
    )


_DEFAULT_SWITCH = SwitchStates()


class Switch(_Table):
    """``[switch]``: the two loads of the switch; an absent state takes the defaults of
    :class:`sweeps.design.SwitchStates`."""

    closed: SwitchLoadConfig = Field(default_factory=lambda: _load_default(_DEFAULT_SWITCH.closed))
    open: SwitchLoadConfig = Field(default_factory=lambda: _load_default(_DEFAULT_SWITCH.open))


class Band(_Table):
    """``[band]``: sweep in MHz; ``target_mhz`` (default: the centre) is where metrics are read."""

    start_mhz: Positive
    stop_mhz: Positive
    points: Annotated[int, Field(ge=2, le=100001)] = 101
    target_mhz: Positive

    @model_validator(mode="before")
    @classmethod
    def _default_target(cls, data: Any) -> Any:
        if isinstance(data, dict) and "target_mhz" not in data:
            a, b = data.get("start_mhz"), data.get("stop_mhz")
            if all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in (a, b)):
                data = {**data, "target_mhz": 0.5 * (a + b)}
        return data

    @model_validator(mode="after")
    def _check(self) -> Band:
        if not self.stop_mhz > self.start_mhz:
            _fail("stop_mhz", f"must be > start_mhz (got {self.stop_mhz:g} <= "
                              f"{self.start_mhz:g})")
        if not self.start_mhz <= self.target_mhz <= self.stop_mhz:
            _fail("target_mhz", f"must lie within the band {self.start_mhz:g}-"
                                f"{self.stop_mhz:g} MHz (got {self.target_mhz:g})")
        return self


_DEFAULT_READER = _PhysReader()


class Reader(_Table):
    """``[reader]``: the reader of the backscatter link (for ``read_range_m``), in dBm and dB.

    Defaults are those of :class:`sweeps.design.Reader`.
    """

    tx_power_dbm: float = _r12(10.0 * math.log10(_DEFAULT_READER.tx_power_w * 1e3))
    antenna_gain_dbi: float = _r12(_DEFAULT_READER.antenna_gain_dbi)
    sensitivity_dbm: float = _r12(10.0 * math.log10(_DEFAULT_READER.sensitivity_w * 1e3))
    cancellation_db: NonNegative = _r12(_DEFAULT_READER.cancellation_db)


_NAME = re.compile(r"^[A-Za-z0-9_.-]+$")


class StudySection(_Table):
    """``[study]``: name (default: the file stem) and store (SQLAlchemy URL; default an SQLite
    file ``<name>.db`` beside the config; a relative SQLite path is taken from the config's
    directory)."""

    name: str
    store: str

    @field_validator("name")
    @classmethod
    def _name(cls, value: str) -> str:
        if not _NAME.match(value):
            _fail(None, f"only letters, digits, '_', '.' and '-' are allowed (got "
                        f"{show_value(value)})")
        return value

    @field_validator("store")
    @classmethod
    def _store(cls, value: str) -> str:
        from sqlalchemy.engine import make_url
        from sqlalchemy.exc import ArgumentError

        try:
            make_url(value)
        except (ArgumentError, ValueError):
            _fail(None, f"not an SQLAlchemy URL such as sqlite:///drawer.db or "
                        f"postgresql://host/db (got {show_value(value)})")
        return value


class Sampler(_Table):
    """``[sampler]``: method, number of points (see :func:`load_study` for grids), seed."""

    method: SamplerMethod
    points: Annotated[int, Field(gt=0)] | None = None
    seed: Annotated[int, Field(ge=0)] = 0


class Objective(_Table):
    """One optimization objective: a metric and whether to maximise or minimise it."""

    metric: MetricName
    goal: Goal


class Constraint(_Table):
    """One optimization constraint: ``min <= metric <= max`` (either bound may be absent)."""

    metric: MetricName
    min: float | None = None
    max: float | None = None

    @model_validator(mode="after")
    def _check(self) -> Constraint:
        if self.min is None and self.max is None:
            _fail("min", "give min, max or both")
        if self.min is not None and self.max is not None and not self.max > self.min:
            _fail("max", f"must be > min (got {self.max:g} <= {self.min:g})")
        return self


class Optimize(_Table):
    """``[optimize]`` (only with ``sampler.method = "optimize"``): trials, algorithm,
    objectives and constraints."""

    trials: Annotated[int, Field(gt=0)]
    algorithm: OptimizeAlgorithm = "tpe"
    objectives: Annotated[
        tuple[Objective, ...], BeforeValidator(_tuple), Field(min_length=1)
    ]
    constraints: Annotated[tuple[Constraint, ...], BeforeValidator(_tuple)] = ()

    @model_validator(mode="after")
    def _check(self) -> Optimize:
        seen: set[str] = set()
        for i, obj in enumerate(self.objectives):
            if obj.metric in seen:
                _fail(f"objectives[{i}].metric", f"{obj.metric} is listed twice")
            seen.add(obj.metric)
        return self


class Jobqueue(_Table):
    """``[cluster.jobqueue]``: workers started through a batch system by dask-jobqueue.

    ``options`` is passed through to the dask-jobqueue cluster class unchanged.
    """

    system: JobqueueSystem
    queue: str | None = None
    cores: Annotated[int, Field(ge=1)]
    memory: Annotated[str, Field(min_length=1)]
    walltime: str | None = None
    jobs: Annotated[int, Field(ge=1)] = 1
    options: dict[str, Any] = Field(default_factory=dict)


_SCHEDULER = re.compile(r"^(tcp|tls)://[^\s/:]+:(\d{1,5})$")


class Cluster(_Table):
    """``[cluster]``: local workers (default one per core), or a running scheduler, or a batch
    system (``jobqueue``); the three are exclusive."""

    workers: Annotated[int, Field(ge=1)] | None = None
    scheduler: str | None = None
    jobqueue: Jobqueue | None = None

    @model_validator(mode="before")
    @classmethod
    def _default_workers(cls, data: Any) -> Any:
        if isinstance(data, dict) and not {"workers", "scheduler", "jobqueue"} & data.keys():
            data = {**data, "workers": os.cpu_count() or 1}
        return data

    @field_validator("scheduler")
    @classmethod
    def _scheduler(cls, value: str | None) -> str | None:
        m = _SCHEDULER.match(value) if value is not None else None
        if value is not None and (m is None or not 0 < int(m.group(2)) < 65536):
            _fail(None, f'must be "tcp://host:port" (got {show_value(value)})')
        return value

    @model_validator(mode="after")
    def _exclusive(self) -> Cluster:
        if self.scheduler is not None and self.jobqueue is not None:
            _fail("jobqueue", "give scheduler (join a running cluster) or jobqueue (start "
                              "workers through a batch system), not both")
        if self.workers is not None and self.scheduler is not None:
            _fail("workers", "not used with scheduler (the running cluster brings its workers)")
        if self.workers is not None and self.jobqueue is not None:
            _fail("workers", "not used with jobqueue (set jobqueue.jobs and jobqueue.cores)")
        return self


class Surrogate(_Table):
    """``[surrogate]``: target metrics (empty: every metric the study stored) and model kind."""

    targets: Annotated[tuple[MetricName, ...], BeforeValidator(_tuple)] = ()
    model: SurrogateModel = "auto"

    @model_validator(mode="after")
    def _check(self) -> Surrogate:
        if len(set(self.targets)) != len(self.targets):
            dup = next(t for t in self.targets if self.targets.count(t) > 1)
            _fail("targets", f"{dup} is listed twice")
        return self


class ParameterSpec(BaseModel):
    """One parameter of the design space, in config units.

    Attributes
    ----------
    name : str
        Canonical dotted name (``antenna.length_mm``, ``switch.closed.r_ohm``).
    kind : {"range", "choice"}
    min, max : float, optional
        Bounds of a range.
    log : bool
        Sample a range on a log scale (``min > 0``).
    steps : int, optional
        Grid levels of a range (always set for ``method = "grid"``).
    values : tuple
        The values of a choice (numbers, or strings such as ``"pec"``).
    integer : bool
        The key takes whole numbers (``antenna.turns``): samplers round range values.
    """

    model_config = ConfigDict(frozen=True)

    name: str
    kind: ParameterKind
    min: float | None = None
    max: float | None = None
    log: bool = False
    steps: int | None = None
    values: tuple[float | int | str, ...] = ()
    integer: bool = False

    @property
    def section(self) -> str:
        """``"antenna"``, ``"feed"``, ``"switch.closed"`` or ``"switch.open"``."""
        return self.name.rpartition(".")[0]

    @property
    def key(self) -> str:
        """The key inside its section (``length_mm``)."""
        return self.name.rpartition(".")[2]


class RangeSpec(_Table):
    min: float
    max: float
    log: bool = False
    steps: Annotated[int, Field(ge=2)] | None = None

    @model_validator(mode="after")
    def _check(self) -> RangeSpec:
        if not self.max > self.min:
            _fail("max", f"must be > min (got {self.max:g} <= {self.min:g})")
        if self.log and not self.min > 0:
            _fail("log", f"a log-scaled range needs min > 0 (got min = {self.min:g})")
        return self



def validate_table(model: type[BaseModel], raw: Any, label: str, prefix: Sequence[str | int],
                   overridden: Sequence[tuple[str, ...]] = (),
                   relabel: Mapping[str, str] | None = None) -> Any:
    """Validate one table; any problem becomes a one-line :class:`ConfigError`.

    ``prefix`` is the table's key path (``("antenna",)``); ``relabel`` maps a key of the table
    to the path to blame instead (a key filled in from ``[space]``).
    """
    try:
        return model.model_validate(raw)
    except ValidationError as exc:
        if relabel:
            first = exc.errors(include_url=False)[0]
            ctx = first.get("ctx") or {}
            key = (list(first.get("loc", ())) + [ctx.get("key", "")])[0]
            if key in relabel:
                _, text = error_text(first)
                raise ConfigError(f"{label}: {relabel[key]}: {text}") from None
        raise ConfigError(describe_validation_error(exc, label, prefix, overridden)) from None
