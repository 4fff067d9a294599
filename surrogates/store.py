"""Saving and loading surrogates safely: numeric arrays plus JSON, never pickle.

A surrogate file is one zip archive (``<study name>.surrogate.zip`` beside the study config):

* ``manifest.json`` — format and version; the features (names, units, ranges, log flags,
  levels); per target the model kind, its JSON parameters, CV scores and training counts; the
  SHA-256 of the training set and the study config's plan fingerprint; for every array its
  dtype, shape and SHA-256; and the SHA-256 of the manifest itself.
* ``arrays/*.npy`` — plain numeric arrays (read with ``allow_pickle=False``).

Loading a file someone sent you cannot run code: JSON is parsed as data, arrays of object type
are refused by numpy, and models are rebuilt only for the kinds in
:data:`surrogates.kinds.MODEL_CLASSES` from numbers. The digests catch edits, truncation and
swapped arrays; each model is also checked for internal consistency (a Gaussian process's
Cholesky factor must factor the kernel matrix of its stored training inputs). The digests are
integrity checks, not a signature: they show the file is what its manifest says, not who
wrote it.

Writes go to a temporary file in the same folder that is then renamed over the target, so an
interrupted save leaves the previous file intact.
"""

from __future__ import annotations

import hashlib
import io
import json
import math
import os
import tempfile
import zipfile
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from surrogates.features import FeatureSpec
from surrogates.kinds import MODEL_CLASSES, rebuild
from surrogates.surrogate import CVScores, Surrogate, TargetModel
from sweeps.errors import ConfigError, StoreError

__all__ = ["FORMAT", "FORMAT_VERSION", "SUFFIX", "surrogate_path", "save_surrogate",
           "load_surrogate", "check_compatible"]

FORMAT = "filamant-surrogate"
FORMAT_VERSION = 1
SUFFIX = ".surrogate.zip"
_MAX_BYTES = 1 << 30  # refuse archives that would unpack to more than 1 GiB
_MAX_MANIFEST = 16 << 20
_ALLOWED_DTYPE_KINDS = "fiub"


def surrogate_path(config_path: str | os.PathLike[str], study_name: str) -> Path:
    """Where the surrogate of a study lives: ``<config dir>/<study name>.surrogate.zip``."""
    return Path(config_path).resolve().parent / f"{study_name}{SUFFIX}"


def _array_digest(a: NDArray) -> str:
    a = np.ascontiguousarray(a)
    h = hashlib.sha256()
    h.update(f"{a.dtype.str}|{a.shape}|".encode())
    h.update(a.tobytes())
    return h.hexdigest()


def _canonical(obj: Any) -> bytes:
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), allow_nan=False).encode()


def _manifest_digest(manifest: dict[str, Any]) -> str:
    body = {k: v for k, v in manifest.items() if k != "manifest_sha256"}
    return hashlib.sha256(_canonical(body)).hexdigest()


def _jsonable(x: Any) -> Any:
    if isinstance(x, dict):
        return {str(k): _jsonable(v) for k, v in x.items()}
    if isinstance(x, list | tuple):
        return [_jsonable(v) for v in x]
    if isinstance(x, np.generic):
        x = x.item()
    if isinstance(x, float) and not math.isfinite(x):
        return None
    return x


def save_surrogate(surrogate: Surrogate, path: str | os.PathLike[str]) -> Path:
    """Write ``surrogate`` to ``path`` (a ``.surrogate.zip`` file), atomically.

    Returns
    -------
    Path
        The file written.
    """
    path = Path(path)
    arrays: dict[str, NDArray] = {"X_train": surrogate.X_train}
    targets: dict[str, Any] = {}
    for name, tm in surrogate.targets.items():
        params, arrs = tm.model.to_state()
        keys = {}
        for k, a in arrs.items():
            key = f"{name}/{k}"
            arrays[key] = np.asarray(a)
            keys[k] = key
        arrays[f"{name}/X_null"] = tm.X_null
        targets[name] = {
            "kind": tm.kind, "unit": tm.unit, "params": _jsonable(params), "arrays": keys,
            "X_null": f"{name}/X_null", "cv": tm.cv.to_json(),
            "candidates": {k: v.to_json() for k, v in tm.candidates.items()},
            "n_train": tm.n_train, "n_dropped": tm.n_dropped, "y_min": tm.y_min,
            "y_max": tm.y_max, "y_std": tm.y_std,
        }
    for key, a in arrays.items():
        if a.dtype.kind not in _ALLOWED_DTYPE_KINDS:
            raise StoreError(f"{path}: array {key} has non-numeric dtype {a.dtype}")
    manifest: dict[str, Any] = {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "features": [f.to_json() for f in surrogate.features],
        "targets": targets,
        "target_order": list(surrogate.targets),
        "training_sha256": surrogate.training_sha256,
        "plan_fingerprint": surrogate.plan_fingerprint,
        "meta": _jsonable(surrogate.meta),
        "arrays": {k: {"file": f"arrays/{k}.npy", "dtype": a.dtype.str,
                       "shape": list(a.shape), "sha256": _array_digest(a)}
                   for k, a in arrays.items()},
    }
    manifest = _jsonable(manifest)
    manifest["manifest_sha256"] = _manifest_digest(manifest)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh, zipfile.ZipFile(fh, "w", zipfile.ZIP_DEFLATED) as zf:
            zf.writestr("manifest.json", json.dumps(manifest, indent=1, sort_keys=True,
                                                    allow_nan=False))
            for k, a in arrays.items():
                buf = io.BytesIO()
                np.lib.format.write_array(buf, np.ascontiguousarray(a), allow_pickle=False)
                zf.writestr(f"arrays/{k}.npy", buf.getvalue())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def _refuse(path: Path, why: str) -> StoreError:
    return StoreError(f"{path}: surrogate file refused: {why}; fit it again with `filamant fit`")


def _read(path: Path) -> tuple[dict[str, Any], dict[str, NDArray]]:
    if not path.exists():
        raise StoreError(f"{path}: no surrogate file; run `filamant fit` on the study first")
    if not zipfile.is_zipfile(path):
        raise _refuse(path, "not a surrogate archive (not a zip file)")
    try:
        with zipfile.ZipFile(path) as zf:
            infos = {i.filename: i for i in zf.infolist()}
            if "manifest.json" not in infos:
                raise _refuse(path, "no manifest.json")
            if sum(i.file_size for i in infos.values()) > _MAX_BYTES:
                raise _refuse(path, "archive unpacks to more than 1 GiB")
            if infos["manifest.json"].file_size > _MAX_MANIFEST:
                raise _refuse(path, "manifest.json is implausibly large")
            try:
                manifest = json.loads(zf.read("manifest.json").decode("utf-8"))
            except (UnicodeDecodeError, json.JSONDecodeError) as exc:
                raise _refuse(path, f"manifest.json is not valid JSON ({exc})") from None
            if not isinstance(manifest, dict) or manifest.get("format") != FORMAT:
                raise _refuse(path, f"not a {FORMAT} file")
            if manifest.get("format_version") != FORMAT_VERSION:
                raise _refuse(path, f"format version {manifest.get('format_version')!r} is not "
                                    f"{FORMAT_VERSION}")
            if manifest.get("manifest_sha256") != _manifest_digest(manifest):
                raise _refuse(path, "manifest.json was edited (its SHA-256 does not match)")
            declared = manifest.get("arrays")
            if not isinstance(declared, dict):
                raise _refuse(path, "manifest lists no arrays")
            files = {d["file"] for d in declared.values()}
            extra = set(infos) - files - {"manifest.json"}
            if extra:
                raise _refuse(path, f"unexpected members {sorted(extra)[:3]}")
            arrays: dict[str, NDArray] = {}
            for key, d in declared.items():
                if d["file"] not in infos:
                    raise _refuse(path, f"array {key} is missing")
                try:
                    a = np.lib.format.read_array(io.BytesIO(zf.read(d["file"])),
                                                 allow_pickle=False)
                except ValueError as exc:
                    raise _refuse(path, f"array {key} is not a plain numeric array ({exc})") \
                        from None
                if a.dtype.kind not in _ALLOWED_DTYPE_KINDS:
                    raise _refuse(path, f"array {key} has dtype {a.dtype}")
                if (a.dtype.str != d["dtype"] or list(a.shape) != d["shape"]
                        or _array_digest(a) != d["sha256"]):
                    raise _refuse(path, f"array {key} does not match its SHA-256 (edited or "
                                        "swapped)")
                arrays[key] = a
    except zipfile.BadZipFile as exc:
        raise _refuse(path, f"damaged archive ({exc})") from None
    except (KeyError, TypeError) as exc:
        raise _refuse(path, f"malformed manifest ({exc!r})") from None
    return manifest, arrays


def load_surrogate(
    path: str | os.PathLike[str],
    *,
    plan_fingerprint: str | None = None,
    features: Sequence[FeatureSpec] | None = None,
    targets: Iterable[str] | None = None,
) -> Surrogate:
    """Load a surrogate file, verifying it, and check it belongs to the given study config.

    Parameters
    ----------
    path : path-like
    plan_fingerprint : str, optional
        The current config's plan fingerprint; a file trained for another is refused.
    features : sequence of FeatureSpec, optional
        The current config's ``[space]``; a file trained over other features is refused.
    targets : iterable of str, optional
        Targets the caller needs; a file without one of them is refused.

    Raises
    ------
    StoreError
        The file is missing, not a surrogate file, damaged or tampered with.
    ConfigError
        The file is intact but was trained for another config.
    """
    path = Path(path)
    manifest, arrays = _read(path)
    try:
        feats = tuple(FeatureSpec.from_json(f) for f in manifest["features"])
        X_train = arrays["X_train"].astype(float)
        width = sum(f.n_columns for f in feats)
        if X_train.ndim != 2 or X_train.shape[1] != width:
            raise ValueError("training inputs do not match the features")
        tms: dict[str, TargetModel] = {}
        order = list(manifest["target_order"])
        if sorted(order) != sorted(manifest["targets"]):
            raise ValueError("target_order does not list the targets")
        for name in order:
            t = manifest["targets"][name]
            if t["kind"] not in MODEL_CLASSES:
                raise ValueError(f"unknown model kind {t['kind']!r}")
            model = rebuild(t["kind"], t["params"],
                            {k: arrays[key] for k, key in t["arrays"].items()})
            if model.n_features_in_ != width:
                raise ValueError(f"model of {name} has {model.n_features_in_} inputs, "
                                 f"features need {width}")
            x_null = arrays[t["X_null"]].astype(float).reshape(-1, width)
            tms[name] = TargetModel(
                name=name, kind=t["kind"], model=model, cv=CVScores.from_json(t["cv"]),
                candidates={k: CVScores.from_json(v) for k, v in t["candidates"].items()},
                n_train=int(t["n_train"]), n_dropped=int(t["n_dropped"]),
                y_min=float(t["y_min"]), y_max=float(t["y_max"]), y_std=float(t["y_std"]),
                X_null=x_null,
            )
    except ConfigError as exc:
        raise _refuse(path, f"invalid feature list ({exc})") from None
    except (KeyError, TypeError, ValueError, IndexError, np.linalg.LinAlgError) as exc:
        raise _refuse(path, f"inconsistent content ({exc})") from None
    sur = Surrogate(features=feats, targets=tms, X_train=X_train,
                    training_sha256=str(manifest["training_sha256"]),
                    plan_fingerprint=manifest.get("plan_fingerprint"),
                    meta=dict(manifest.get("meta") or {}))
    check_compatible(sur, path, plan_fingerprint=plan_fingerprint, features=features,
                     targets=targets)
    return sur


def check_compatible(
    surrogate: Surrogate,
    path: str | os.PathLike[str],
    *,
    plan_fingerprint: str | None = None,
    features: Sequence[FeatureSpec] | None = None,
    targets: Iterable[str] | None = None,
) -> None:
    """Refuse (``ConfigError`` naming ``path``) a surrogate trained for another config."""
    remedy = "run `filamant fit` on this config to train one for it"
    if plan_fingerprint is not None and surrogate.plan_fingerprint != plan_fingerprint:
        raise ConfigError(
            f"{path}: this surrogate was trained on another config (plan fingerprint "
            f"{str(surrogate.plan_fingerprint)[:12]}, this config {plan_fingerprint[:12]}); "
            f"{remedy}"
        )
    if features is not None:
        mine = [f.to_json() for f in surrogate.features]
        theirs = [f.to_json() for f in features]
        if mine != theirs:
            names = [f["name"] for f in mine]
            want = [f["name"] for f in theirs]
            what = (f"features {names} vs the config's {want}" if names != want
                    else "the same features over different ranges or levels")
            raise ConfigError(f"{path}: this surrogate was trained on another config "
                              f"({what}); {remedy}")
    for t in targets or ():
        if t not in surrogate.targets:
            raise ConfigError(
                f"{path}: this surrogate has no model for {t!r} (targets: "
                f"{', '.join(surrogate.targets)}); add it to [surrogate] targets and {remedy}"
            )
