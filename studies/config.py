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
from typing import Any

from pydantic import BaseModel, ConfigDict, Field

from studies.sections import (
    Antenna,
    Band,
    Cluster,
    Feed,
    Optimize,
    ParameterSpec,
    Reader,
    Sampler,
    StudySection,
    Surrogate,
    Switch,
    validate_table,
)
from studies.spacespec import check_value, finish_grid, flatten_space, parse_spec
from studies.tomlfile import apply_overrides, format_loc, read_toml, show_value, suggest
from sweeps.errors import ConfigError

__all__ = [
    "DesignConfig",
    "Study",
    "TouchstoneOptions",
    "load_design",
    "load_study",
    "touchstone_options",
    "SECTIONS",
]

#: Every top-level section a config file may hold.
SECTIONS: tuple[str, ...] = (
    "study", "antenna", "feed", "switch", "band", "space", "sampler", "optimize", "cluster",
    "reader", "surrogate",
)


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
        ``optimize`` but its ``trials`` and the solver settings with the solver version.
        ``study`` (name, store), ``cluster`` and ``surrogate`` never change a result; ``reader``
        changes only ``read_range_m`` and is hashed separately by :meth:`metrics_fingerprint`.
        ``optimize.trials`` is only where the optimizer stops: raising it and running again
        continues the same study with more trials.
        """
        from studies.designio import solver_settings

        canon = self.canonical()
        content = {k: canon[k] for k in ("antenna", "feed", "switch", "band", "space",
                                         "sampler", "optimize")}
        if content["optimize"] is not None:
            content["optimize"] = {k: v for k, v in content["optimize"].items() if k != "trials"}
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
        "antenna": validate_table(Antenna, antenna_raw, label, ("antenna",), paths, relabel),
        "feed": validate_table(Feed, raw.get("feed", {}), label, ("feed",), paths),
        "switch": validate_table(Switch, raw.get("switch", {}), label, ("switch",), paths),
        "band": validate_table(Band, raw["band"], label, ("band",), paths),
        "reader": validate_table(Reader, raw.get("reader", {}), label, ("reader",), paths),
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
    sampler = validate_table(Sampler, raw["sampler"], label, ("sampler",), paths)
    if sampler.method == "optimize":
        if "optimize" not in raw:
            raise ConfigError(f"{label}: missing section [optimize] (needed by sampler.method = "
                              "\"optimize\")")
        if sampler.points is not None:
            raise ConfigError(f"{label}: sampler.points: not used with method = \"optimize\" "
                              "(set optimize.trials)")
        optimize = validate_table(Optimize, raw["optimize"], label, ("optimize",), paths)
    else:
        if "optimize" in raw:
            raise ConfigError(f"{label}: optimize: only used with sampler.method = \"optimize\" "
                              f"(got method = \"{sampler.method}\"); remove [optimize]")
        optimize = None
        if sampler.method != "grid" and sampler.points is None:
            raise ConfigError(f"{label}: sampler.points: required for method "
                              f"\"{sampler.method}\"")

    entries = flatten_space(raw["space"], label)
    specs: dict[str, ParameterSpec] = {}
    path_of: dict[str, str] = {}
    for name, spath, value in entries:
        if name in specs:
            raise ConfigError(f"{label}: {format_loc(('space', *spath))}: {name} is given "
                              f"twice (also as {path_of[name]})")
        specs[name] = parse_spec(name, spath, value, label, paths)
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

    ordered = finish_grid([specs[n] for n in sorted(specs)], sampler, label, path_of)

    stem = Path(path).stem
    study_raw = dict(raw.get("study", {}))
    study_raw.setdefault("name", re.sub(r"[^A-Za-z0-9_.-]", "_", stem) or "study")
    config_dir = Path(path).resolve().parent
    if "store" not in study_raw and isinstance(study_raw["name"], str):
        study_raw["store"] = f"sqlite:///{config_dir / study_raw['name']}.db"
    study = validate_table(StudySection, study_raw, label, ("study",), paths)
    study = study.model_copy(update={"store": _resolve_sqlite(study.store, config_dir)})

    return Study(
        source=Path(path),
        study=study,
        space=tuple(ordered),
        sampler=sampler,
        optimize=optimize,
        cluster=validate_table(Cluster, raw.get("cluster", {}), label, ("cluster",), paths),
        surrogate=validate_table(Surrogate, raw.get("surrogate", {}), label, ("surrogate",), paths),
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

    ``target_mhz`` (the ``--target-mhz`` option) wins over ``--set band.target_mhz``. Only
    ``switch.*``, ``reader.*``, ``feed.z0_ohm`` and ``band.target_mhz`` apply to a measured or
    simulated S-parameter file; anything else is an error naming the key.
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
    switch = validate_table(Switch, raw.get("switch", {}), label, ("switch",), paths)
    reader = validate_table(Reader, raw.get("reader", {}), label, ("reader",), paths)
    z0 = raw.get("feed", {}).get("z0_ohm")
    target = target_mhz if target_mhz is not None else raw.get("band", {}).get("target_mhz")
    if z0 is not None:
        z0 = check_value("feed.z0_ohm", z0, "--set feed.z0_ohm")
    if target is not None:
        if isinstance(target, bool) or not isinstance(target, (int, float)) \
                or not (math.isfinite(target) and target > 0):
            raise ConfigError(f"--set band.target_mhz: must be a frequency > 0 in MHz (got "
                              f"{show_value(target)})")
        target = float(target)
    return TouchstoneOptions(switch=switch, reader=reader, z0_ohm=z0, target_mhz=target)
