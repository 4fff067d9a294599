"""Study and design configuration: the TOML schema of DESIGN.md as frozen pydantic models.

Two entry points:

- :func:`load_design` reads a single-design file (``[antenna]`` and ``[band]`` required;
  ``[feed]``, ``[switch]``, ``[reader]`` optional). A study file is also a design file: its
  study sections are accepted and ignored.
- :func:`load_study` reads a whole study (``[space]`` and ``[sampler]`` required as well).

Both apply ``--set section.key=value`` overrides to the parsed TOML *before* validation (see
:mod:`studies.tomlfile`; nothing is evaluated as code) and raise :class:`ConfigError` with one
line naming the file and the key path, e.g.
``drawer.toml: space.lenght_mm: unknown key; did you mean length_mm?``.

Units are the config's own (mm, MHz, nH, pF, dBm, S/m; ``"pec"`` for a perfect conductor).
:mod:`studies.designio` is the one place where they become SI.

Parameters of a study
---------------------
Each ``[space]`` entry is a parameter, ``{min, max, log = false, steps = n}`` or a list of
values. A bare key is an ``[antenna]`` key; other sections use dotted TOML keys
(``feed.gap_mm``, ``switch.closed.r_ohm``). The canonical name of a parameter is its full dotted
path (``antenna.length_mm``, ``switch.closed.r_ohm``), in config units, and
:attr:`Study.parameters` lists them sorted by name (so reordering the file does not change the
plan). An ``[antenna]`` key that is varied need not be given in ``[antenna]``: the base design
then holds the parameter's first value (``min`` of a range, first entry of a list) and every
point overrides it. For ``method = "grid"`` every range ends up with ``steps``: its own, else
``sampler.points``, else (whole-number keys) one step per integer.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import re
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Annotated, Any, Literal, NoReturn

from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    PlainValidator,
    TypeAdapter,
    ValidationError,
    field_validator,
    model_validator,
)
from pydantic_core import PydanticCustomError

from studies.constants import (
    INTEGER_KEYS,
    METRIC_NAMES,
    SHAPE_KEYS,
    SHAPE_SPECIFIC_KEYS,
    VARIABLE_KEYS,
    Goal,
    JobqueueSystem,
    OptimizeAlgorithm,
    ParameterKind,
    SamplerMethod,
    ShapeName,
    SurrogateModel,
)
from studies.tomlfile import (
    apply_overrides,
    describe_validation_error,
    error_text,
    format_loc,
    read_toml,
    show_value,
    suggest,
)
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
    "DesignConfig",
    "Study",
    "TouchstoneOptions",
    "load_design",
    "load_study",
    "touchstone_options",
    "check_value",
    "SECTIONS",
]

#: Every top-level section a config file may hold.
SECTIONS: tuple[str, ...] = (
    "study", "antenna", "feed", "switch", "band", "space", "sampler", "optimize", "cluster",
    "reader", "surrogate",
)

_CFG = ConfigDict(extra="forbid", frozen=True, strict=True, allow_inf_nan=False)


def _fail(key: str | None, text: str) -> NoReturn:
    """Raise a validation error with our own text; ``key`` is appended to the location."""
    raise PydanticCustomError("filamant", "{text}", {"text": text, "key": key or ""})


def _r12(x: float) -> float:
    """Round to 12 significant digits (unit conversions of defaults: 1e-9 * 1e9 -> 1.0)."""
    return float(f"{x:.12g}")


class _Table(BaseModel):
    """A TOML table: unknown keys are errors with a suggestion."""

    model_config = _CFG

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


class _RangeSpec(_Table):
    min: float
    max: float
    log: bool = False
    steps: Annotated[int, Field(ge=2)] | None = None

    @model_validator(mode="after")
    def _check(self) -> _RangeSpec:
        if not self.max > self.min:
            _fail("max", f"must be > min (got {self.max:g} <= {self.min:g})")
        if self.log and not self.min > 0:
            _fail("log", f"a log-scaled range needs min > 0 (got min = {self.min:g})")
        return self


def _sorted(value: Any) -> Any:
    if isinstance(value, dict):
        return {k: _sorted(value[k]) for k in sorted(value)}
    if isinstance(value, (list, tuple)):
        return [_sorted(v) for v in value]
    return value


def _hash(payload: Any) -> str:
    text = json.dumps(payload, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode()).hexdigest()


class DesignConfig(BaseModel):
    """A validated single-design config (config units)."""

    model_config = ConfigDict(frozen=True)

    source: Path | None = None
    antenna: Antenna
    feed: Feed = Field(default_factory=Feed)
    switch: Switch = Field(default_factory=Switch)
    band: Band
    reader: Reader = Field(default_factory=Reader)

    def _physical(self) -> dict[str, Any]:
        return {
            name: getattr(self, name).model_dump(mode="json", exclude_none=True)
            for name in ("antenna", "feed", "switch", "band")
        }

    def canonical(self) -> dict[str, Any]:
        """The validated config as a JSON-serialisable dict, keys sorted, in config units.

        Absent optional keys are left out (so adding an optional key to the schema later keeps
        the fingerprints of existing configs).
        """
        out = self._physical()
        out["reader"] = self.reader.model_dump(mode="json", exclude_none=True)
        return _sorted(out)


class Study(DesignConfig):
    """A validated study config (config units). Build it with :func:`load_study`."""

    study: StudySection
    space: tuple[ParameterSpec, ...]
    sampler: Sampler
    optimize: Optimize | None = None
    cluster: Cluster = Field(default_factory=Cluster)
    surrogate: Surrogate = Field(default_factory=Surrogate)

    @property
    def name(self) -> str:
        return self.study.name

    @property
    def parameters(self) -> list[ParameterSpec]:
        """The parameters of the design space, sorted by canonical name."""
        return list(self.space)

    def parameter(self, name: str) -> ParameterSpec:
        """The parameter called ``name`` (canonical dotted name)."""
        for spec in self.space:
            if spec.name == name:
                return spec
        raise ConfigError(f"{name}: not a parameter of study {self.name!r}"
                          + suggest(name, [s.name for s in self.space]))

    def canonical(self) -> dict[str, Any]:
        """The whole validated study as a JSON-serialisable dict, keys sorted, config units.

        ``space`` maps each canonical parameter name to its spec. ``source`` is left out.
        """
        out = super().canonical()
        out["study"] = self.study.model_dump(mode="json")
        out["space"] = {
            p.name: p.model_dump(mode="json", exclude={"name"}, exclude_none=True)
            for p in self.space
        }
        for name in ("sampler", "optimize", "cluster", "surrogate"):
            section = getattr(self, name)
            out[name] = None if section is None else section.model_dump(
                mode="json", exclude_none=True)
        return _sorted(out)

    def plan_content(self) -> dict[str, Any]:
        """What :meth:`plan_fingerprint` hashes: everything that changes the plan or a solve.

        That is ``antenna``, ``feed``, ``switch``, ``band``, ``space``, ``sampler``,
        ``optimize`` and the solver settings with the solver version. ``study`` (name, store),
        ``cluster`` and ``surrogate`` never change a result; ``reader`` changes only
        ``read_range_m`` and is hashed separately by :meth:`metrics_fingerprint`.
        """
        from studies.designio import solver_settings

        canon = self.canonical()
        content = {k: canon[k] for k in ("antenna", "feed", "switch", "band", "space",
                                         "sampler", "optimize")}
        content["solver"] = _sorted(solver_settings(self).fingerprint())
        return content

    def plan_fingerprint(self) -> str:
        """SHA-256 (hex) of :meth:`plan_content`: a stored study with another fingerprint
        holds results of a different plan."""
        return _hash(self.plan_content())

    def metrics_fingerprint(self) -> str:
        """SHA-256 (hex) of the settings that change metrics but not the solves: ``[reader]``
        (it enters ``read_range_m`` only, which can be recomputed from stored responses)."""
        return _hash({"reader": self.canonical()["reader"]})


class TouchstoneOptions(BaseModel):
    """Settings for evaluating a Touchstone result (from ``--set`` overrides only)."""

    model_config = ConfigDict(frozen=True)

    switch: Switch = Field(default_factory=Switch)
    reader: Reader = Field(default_factory=Reader)
    z0_ohm: float | None = None
    target_mhz: float | None = None


# ----------------------------------------------------------------------------------- loading


def _validate(model: type[BaseModel], raw: Any, label: str, prefix: Sequence[str | int],
              overridden: Sequence[tuple[str, ...]] = (),
              relabel: Mapping[str, str] | None = None) -> Any:
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


def _read(path: str | os.PathLike[str], overrides: Sequence[str]
          ) -> tuple[dict[str, Any], str, list[tuple[str, ...]]]:
    label = os.fspath(path)
    raw = read_toml(Path(path), label)
    raw, paths = apply_overrides(raw, overrides, label)
    for key, value in raw.items():
        if key not in SECTIONS:
            raise ConfigError(f"{label}: {format_loc((key,))}: unknown section"
                              + suggest(key, SECTIONS))
        if not isinstance(value, dict):
            raise ConfigError(f"{label}: {key}: must be a table [{key}] (got "
                              f"{show_value(value)})")
    return raw, label, paths


def _require(raw: Mapping[str, Any], names: Sequence[str], label: str) -> None:
    for name in names:
        if name not in raw:
            raise ConfigError(f"{label}: missing section [{name}]")


def _physical_sections(raw: dict[str, Any], label: str, paths: list[tuple[str, ...]],
                       antenna_fill: Mapping[str, Any] | None = None,
                       relabel: Mapping[str, str] | None = None) -> dict[str, Any]:
    antenna_raw = raw["antenna"]
    if antenna_fill:
        antenna_raw = {**antenna_fill, **antenna_raw}
    return {
        "antenna": _validate(Antenna, antenna_raw, label, ("antenna",), paths, relabel),
        "feed": _validate(Feed, raw.get("feed", {}), label, ("feed",), paths),
        "switch": _validate(Switch, raw.get("switch", {}), label, ("switch",), paths),
        "band": _validate(Band, raw["band"], label, ("band",), paths),
        "reader": _validate(Reader, raw.get("reader", {}), label, ("reader",), paths),
    }


def load_design(path: str | os.PathLike[str], overrides: Sequence[str] = ()) -> DesignConfig:
    """Read and validate a single-design file.

    Parameters
    ----------
    path : path-like
        TOML file with ``[antenna]`` and ``[band]`` (and optionally ``[feed]``, ``[switch]``,
        ``[reader]``). Study sections are allowed (a study file is a design file) and ignored.
    overrides : sequence of str
        ``section.key=value`` items applied before validation.

    Returns
    -------
    DesignConfig

    Raises
    ------
    ConfigError
        One line naming the file and the key path.
    """
    raw, label, paths = _read(path, overrides)
    _require(raw, ("antenna", "band"), label)
    return DesignConfig(source=Path(path), **_physical_sections(raw, label, paths))


# --------------------------------------------------------------------------------- the space


def _is_spec(value: Any) -> bool:
    return isinstance(value, dict) and bool({"min", "max", "log", "steps"} & value.keys())


def _flatten_space(space: dict[str, Any], label: str
                   ) -> list[tuple[str, tuple[str, ...], Any]]:
    """``[space]`` → ``(canonical name, path inside [space], raw spec)``, in file order."""
    out: list[tuple[str, tuple[str, ...], Any]] = []

    def where(path: tuple[str, ...]) -> str:
        return format_loc(("space", *path))

    def leaf(section: str, key: str, path: tuple[str, ...], value: Any) -> None:
        allowed = VARIABLE_KEYS[section]
        if key not in allowed:
            base = section.split(".")[0]
            if base == "antenna" and key in ("shape", "wires", "feed_point_mm"):
                raise ConfigError(f"{label}: {where(path)}: antenna.{key} cannot be varied "
                                  "(run one study per shape)")
            extra: list[str] = []
            if section == "antenna" and len(path) == 1:
                extra = ["antenna", "feed", "switch"]
            raise ConfigError(f"{label}: {where(path)}: unknown key"
                              + suggest(key, [*allowed, *extra]))
        out.append((f"{section}.{key}", path, value))

    for key, value in space.items():
        path: tuple[str, ...] = (key,)
        if key in ("antenna", "feed", "switch") and isinstance(value, dict) \
                and not _is_spec(value):
            for sub, subval in value.items():
                subpath = (*path, sub)
                if key != "switch":
                    leaf(key, sub, subpath, subval)
                elif sub in ("closed", "open") and isinstance(subval, dict) \
                        and not _is_spec(subval):
                    for leafkey, leafval in subval.items():
                        leaf(f"switch.{sub}", leafkey, (*subpath, leafkey), leafval)
                else:
                    raise ConfigError(
                        f"{label}: {where(subpath)}: expected switch.closed.<key> or "
                        f"switch.open.<key>" + (suggest(sub, ["closed", "open"])
                                                if sub not in ("closed", "open") else "")
                    )
        else:
            leaf("antenna", key, path, value)
    if not out:
        raise ConfigError(f"{label}: space: no parameters (add one, e.g. length_mm = "
                          "{min = 140, max = 160})")
    return out


_SECTION_MODELS: dict[str, type[BaseModel]] = {
    "antenna": Antenna, "feed": Feed, "switch.closed": SwitchLoadConfig,
    "switch.open": SwitchLoadConfig,
}
_ADAPTERS: dict[str, TypeAdapter[Any]] = {}


def _field_adapter(section: str, key: str) -> TypeAdapter[Any]:
    """A validator for one key alone (type and range), for parameter values."""
    name = f"{section}.{key}"
    if name not in _ADAPTERS:
        info = _SECTION_MODELS[section].model_fields[key]
        annotation = info.annotation
        _ADAPTERS[name] = TypeAdapter(Annotated[annotation, info], config=_CFG)
    return _ADAPTERS[name]


def check_value(name: str, value: Any, label: str) -> Any:
    """Validate one parameter value for the key ``name`` (canonical); returns it normalised.

    Whole-number keys accept integral floats (samplers work in floats); numpy scalars become
    Python numbers.
    """
    section, _, key = name.rpartition(".")
    if isinstance(value, bool):
        pass
    elif hasattr(value, "item") and not isinstance(value, (int, float, str)):
        value = value.item()  # numpy scalar
    if name in INTEGER_KEYS and isinstance(value, float) and value.is_integer():
        value = int(value)
    elif name not in INTEGER_KEYS and isinstance(value, int) and not isinstance(value, bool):
        value = float(value)
    if value is None:
        raise ConfigError(f"{label}: must be a number (got null)")
    try:
        return _field_adapter(section, key).validate_python(value)
    except ValidationError as exc:
        raise ConfigError(describe_validation_error(exc, label)) from None


def _parse_spec(name: str, path: tuple[str, ...], raw: Any, label: str,
                overridden: Sequence[tuple[str, ...]]) -> ParameterSpec:
    where = format_loc(("space", *path))
    section, _, key = name.rpartition(".")
    integer = name in INTEGER_KEYS

    def check(value: Any, suffix: str) -> Any:
        adapter = _field_adapter(section, key)
        try:
            return adapter.validate_python(value)
        except ValidationError as exc:
            raise ConfigError(describe_validation_error(exc, f"{label}: {where}{suffix}")
                              ) from None

    if isinstance(raw, list):
        if not raw:
            raise ConfigError(f"{label}: {where}: the list of values is empty")
        values = []
        for i, v in enumerate(raw):
            if v is None:
                raise ConfigError(f"{label}: {where}[{i}]: missing value")
            checked = check(v, f"[{i}]")
            if checked in values:
                raise ConfigError(f"{label}: {where}[{i}]: duplicate value {show_value(v)}")
            values.append(checked)
        return ParameterSpec(name=name, kind="choice", values=tuple(values), integer=integer)
    if isinstance(raw, dict):
        if not _is_spec(raw):
            raise ConfigError(f"{label}: {where}: a parameter is {{min, max, log, steps}} or a "
                              f"list of values (got a table with keys {show_value(list(raw))})")
        spec = _validate(_RangeSpec, raw, label, ("space", *path), overridden)
        for bound in ("min", "max"):
            check(raw[bound], f".{bound}")
        return ParameterSpec(name=name, kind="range", min=spec.min, max=spec.max,
                             log=spec.log, steps=spec.steps, integer=integer)
    raise ConfigError(f"{label}: {where}: a parameter is {{min, max, log, steps}} or a list of "
                      f"values (got {show_value(raw)}); write length_mm = 150 in [antenna] for a "
                      "fixed value")


def _finish_grid(specs: list[ParameterSpec], sampler: Sampler, label: str,
                 path_of: Mapping[str, str]) -> list[ParameterSpec]:
    out = []
    lacking = [s for s in specs if s.kind == "range" and s.steps is None]
    if sampler.method == "grid":
        if sampler.points is not None and not lacking:
            raise ConfigError(f"{label}: sampler.points: not used: every parameter has steps "
                              "or a list of values (remove sampler.points)")
        for s in specs:
            if s.kind == "range":
                steps = s.steps
                span = int(s.max - s.min) + 1 if s.integer else None  # type: ignore[operator]
                if steps is None:
                    steps = sampler.points if sampler.points is not None else span
                if steps is None:
                    raise ConfigError(f"{label}: {path_of[s.name]}: method \"grid\" needs steps "
                                      "here (or sampler.points for every range)")
                if span is not None and steps > span:
                    raise ConfigError(f"{label}: {path_of[s.name]}.steps: the whole-number range "
                                      f"{s.min:g}..{s.max:g} has only {span} values (got "
                                      f"steps = {steps})")
                if steps < 2:
                    raise ConfigError(f"{label}: {path_of[s.name]}: a grid range needs at least "
                                      f"2 steps (got {steps})")
                s = s.model_copy(update={"steps": steps})
            out.append(s)
        return out
    for s in specs:
        if s.steps is not None:
            raise ConfigError(f"{label}: {path_of[s.name]}.steps: only used with sampler.method "
                              f"= \"grid\" (got method = \"{sampler.method}\")")
    return specs


def load_study(path: str | os.PathLike[str], overrides: Sequence[str] = ()) -> Study:
    """Read and validate a study file.

    Parameters
    ----------
    path : path-like
        TOML study file (``[antenna]``, ``[band]``, ``[space]`` and ``[sampler]`` required).
    overrides : sequence of str
        ``section.key=value`` items applied to the parsed TOML before validation; the value is a
        TOML value (``--set space.length_mm={min = 140, max = 160}``) or a bare word string.

    Returns
    -------
    Study

    Raises
    ------
    ConfigError
        One line naming the file and the key path: unknown keys (with a suggestion), values out
        of range, wrong types, missing sections or keys, TOML syntax errors (with the line),
        a missing file.

    Notes
    -----
    Sampler rules: ``points`` is required for ``sobol``, ``lhs`` and ``random``; for ``grid`` it
    is the number of steps of every range without its own ``steps`` (and may be omitted when
    each range has ``steps`` or is a whole-number range); ``steps`` is only allowed with
    ``grid``. ``method = "optimize"`` needs ``[optimize]`` and takes no ``points``; an
    ``[optimize]`` section with another method is an error.
    """
    raw, label, paths = _read(path, overrides)
    _require(raw, ("antenna", "band", "space", "sampler"), label)
    sampler = _validate(Sampler, raw["sampler"], label, ("sampler",), paths)
    if sampler.method == "optimize":
        if "optimize" not in raw:
            raise ConfigError(f"{label}: missing section [optimize] (needed by sampler.method = "
                              "\"optimize\")")
        if sampler.points is not None:
            raise ConfigError(f"{label}: sampler.points: not used with method = \"optimize\" "
                              "(set optimize.trials)")
        optimize = _validate(Optimize, raw["optimize"], label, ("optimize",), paths)
    else:
        if "optimize" in raw:
            raise ConfigError(f"{label}: optimize: only used with sampler.method = \"optimize\" "
                              f"(got method = \"{sampler.method}\"); remove [optimize]")
        optimize = None
        if sampler.method != "grid" and sampler.points is None:
            raise ConfigError(f"{label}: sampler.points: required for method "
                              f"\"{sampler.method}\"")

    entries = _flatten_space(raw["space"], label)
    specs: dict[str, ParameterSpec] = {}
    path_of: dict[str, str] = {}
    for name, spath, value in entries:
        if name in specs:
            raise ConfigError(f"{label}: {format_loc(('space', *spath))}: {name} is given "
                              f"twice (also as {path_of[name]})")
        specs[name] = _parse_spec(name, spath, value, label, paths)
        path_of[name] = format_loc(("space", *spath))

    # varied antenna keys missing from [antenna]: the base takes the parameter's first value
    antenna_raw = raw["antenna"]
    fill: dict[str, Any] = {}
    relabel: dict[str, str] = {}
    for name, spec in specs.items():
        if spec.section == "antenna" and spec.key not in antenna_raw:
            first = spec.values[0] if spec.kind == "choice" else spec.min
            if spec.integer and isinstance(first, float):
                first = int(first)
            fill[spec.key] = first
            relabel[spec.key] = path_of[name]
    physical = _physical_sections(raw, label, paths, fill, relabel)

    ordered = _finish_grid([specs[n] for n in sorted(specs)], sampler, label, path_of)

    stem = Path(path).stem
    study_raw = dict(raw.get("study", {}))
    study_raw.setdefault("name", re.sub(r"[^A-Za-z0-9_.-]", "_", stem) or "study")
    config_dir = Path(path).resolve().parent
    if "store" not in study_raw and isinstance(study_raw["name"], str):
        study_raw["store"] = f"sqlite:///{config_dir / study_raw['name']}.db"
    study = _validate(StudySection, study_raw, label, ("study",), paths)
    study = study.model_copy(update={"store": _resolve_sqlite(study.store, config_dir)})

    return Study(
        source=Path(path),
        study=study,
        space=tuple(ordered),
        sampler=sampler,
        optimize=optimize,
        cluster=_validate(Cluster, raw.get("cluster", {}), label, ("cluster",), paths),
        surrogate=_validate(Surrogate, raw.get("surrogate", {}), label, ("surrogate",), paths),
        **physical,
    )


def _resolve_sqlite(url: str, config_dir: Path) -> str:
    """A relative SQLite path is taken from the config's directory."""
    from sqlalchemy.engine import make_url

    u = make_url(url)
    db = u.database
    if u.get_backend_name() == "sqlite" and db and db != ":memory:" \
            and not db.startswith("file:") and not Path(db).is_absolute():
        return u.set(database=str(config_dir / db)).render_as_string(hide_password=False)
    return url


def touchstone_options(overrides: Sequence[str] = (), *, target_mhz: float | None = None
                       ) -> TouchstoneOptions:
    """Settings for evaluating a Touchstone result, from ``--set`` overrides alone.

    Only ``switch.*``, ``reader.*``, ``feed.z0_ohm`` and ``band.target_mhz`` apply to a
    measured or simulated S-parameter file; anything else is an error naming the key.
    """
    label = "--set"
    raw, paths = apply_overrides({}, overrides, label)
    for section, value in raw.items():
        allowed = {"switch": None, "reader": None, "feed": {"z0_ohm"}, "band": {"target_mhz"}}
        if section not in allowed or (
                allowed[section] is not None and not set(value) <= allowed[section]):
            bad = section if section not in allowed else next(
                k for k in value if k not in allowed[section])  # type: ignore[operator]
            where = bad if section not in allowed else f"{section}.{bad}"
            raise ConfigError(f"--set {where}: does not apply to a Touchstone result (use "
                              "switch.*, reader.*, feed.z0_ohm or band.target_mhz)")
    switch = _validate(Switch, raw.get("switch", {}), label, ("switch",), paths)
    reader = _validate(Reader, raw.get("reader", {}), label, ("reader",), paths)
    z0 = raw.get("feed", {}).get("z0_ohm")
    target = raw.get("band", {}).get("target_mhz", target_mhz)
    if z0 is not None:
        z0 = check_value("feed.z0_ohm", z0, "--set feed.z0_ohm")
    if target is not None:
        if isinstance(target, bool) or not isinstance(target, (int, float)) \
                or not (math.isfinite(target) and target > 0):
            raise ConfigError(f"target: must be a frequency > 0 in MHz (got {show_value(target)})")
        target = float(target)
    return TouchstoneOptions(switch=switch, reader=reader, z0_ohm=z0, target_mhz=target)
