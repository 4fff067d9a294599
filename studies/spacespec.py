"""The ``[space]`` section: its nested TOML tables flattened into :class:`ParameterSpec` s.

A bare key is an ``[antenna]`` key; other sections by dotted TOML keys (``feed.gap_mm``,
``switch.closed.r_ohm``), which TOML turns into nested tables: a table holding ``min``, ``max``,
``log`` or ``steps`` is a parameter, any other table a prefix. Every value a parameter can take
(``min``, ``max``, each list entry) is checked against its key's own type and range.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Annotated, Any

from pydantic import BaseModel, TypeAdapter, ValidationError

from studies.constants import INTEGER_KEYS, VARIABLE_KEYS
from studies.sections import (
    STRICT,
    Antenna,
    Feed,
    ParameterSpec,
    RangeSpec,
    Sampler,
    SwitchLoadConfig,
    validate_table,
)
from studies.tomlfile import describe_validation_error, format_loc, show_value, suggest
from sweeps.errors import ConfigError

__all__ = ["flatten_space", "parse_spec", "finish_grid", "check_value", "is_spec"]


def is_spec(value: Any) -> bool:
    """Whether a ``[space]`` table is a range spec (rather than a prefix such as ``feed``)."""
    return isinstance(value, dict) and bool({"min", "max", "log", "steps"} & value.keys())


def flatten_space(space: dict[str, Any], label: str
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
                and not is_spec(value):
            for sub, subval in value.items():
                subpath = (*path, sub)
                if key != "switch":
                    leaf(key, sub, subpath, subval)
                elif sub in ("closed", "open") and isinstance(subval, dict) \
                        and not is_spec(subval):
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
        _ADAPTERS[name] = TypeAdapter(Annotated[annotation, info], config=STRICT)
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


def parse_spec(name: str, path: tuple[str, ...], raw: Any, label: str,
               overridden: Sequence[tuple[str, ...]]) -> ParameterSpec:
    """One ``[space]`` entry (a list of values or a range table) as a :class:`ParameterSpec`.

    ``path`` is the entry's key path inside ``[space]``, for the error messages.
    """
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
        if not is_spec(raw):
            raise ConfigError(f"{label}: {where}: a parameter is {{min, max, log, steps}} or a "
                              f"list of values (got a table with keys {show_value(list(raw))})")
        spec = validate_table(RangeSpec, raw, label, ("space", *path), overridden)
        for bound in ("min", "max"):
            check(raw[bound], f".{bound}")
        return ParameterSpec(name=name, kind="range", min=spec.min, max=spec.max,
                             log=spec.log, steps=spec.steps, integer=integer)
    raise ConfigError(f"{label}: {where}: a parameter is {{min, max, log, steps}} or a list of "
                      f"values (got {show_value(raw)}); write length_mm = 150 in [antenna] for a "
                      "fixed value")


def finish_grid(specs: list[ParameterSpec], sampler: Sampler, label: str,
                path_of: Mapping[str, str]) -> list[ParameterSpec]:
    """Apply the sampler's rules on ``steps``: every grid range gets its levels (its own
    ``steps``, else ``sampler.points``, else one per whole number); other methods take none."""
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


